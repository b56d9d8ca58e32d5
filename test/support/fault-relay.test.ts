// The fault relay between two local sockets: lines both ways, each hook (transform, delay, drop
// the connection, refuse new ones), the log, its bounds and close(). Waits are on events with
// generous timeouts; the one timing check is a lower bound, which load can only make longer.
import { connect, createServer, type AddressInfo, type Server, type Socket } from 'node:net';
import { afterEach, describe, expect, it } from 'vitest';
import { startFaultRelay, type FaultRelay } from './fault-relay.ts';

/** The far end: records every connection and the text each received, and can speak on each. */
interface Upstream {
  readonly port: number;
  readonly sockets: Socket[];
  readonly received: string[];
  readonly ended: boolean[];
  readonly arrivedAtMs: Array<Array<{ text: string; atMs: number }>>;
  close(): Promise<void>;
}

async function startUpstream(): Promise<Upstream> {
  const sockets: Socket[] = [];
  const received: string[] = [];
  const ended: boolean[] = [];
  const arrivedAtMs: Array<Array<{ text: string; atMs: number }>> = [];
  const server: Server = createServer({ allowHalfOpen: true }, (socket) => {
    const i = sockets.push(socket) - 1;
    received[i] = '';
    ended[i] = false;
    arrivedAtMs[i] = [];
    socket.on('data', (chunk: Buffer) => {
      received[i] += chunk.toString('latin1');
      arrivedAtMs[i]?.push({ text: chunk.toString('latin1'), atMs: Date.now() });
    });
    socket.on('end', () => (ended[i] = true));
    socket.on('error', () => undefined);
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  return {
    port: (server.address() as AddressInfo).port,
    sockets,
    received,
    ended,
    arrivedAtMs,
    close: async () => {
      for (const socket of sockets) socket.destroy();
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}

/** A client of the relay, collecting what it receives and how its connection ended. */
interface Client {
  readonly socket: Socket;
  text: string;
  closed: boolean;
  error: NodeJS.ErrnoException | undefined;
}

function connectClient(port: number): Client {
  const socket = connect({ host: '127.0.0.1', port });
  const client: Client = { socket, text: '', closed: false, error: undefined };
  socket.on('data', (chunk: Buffer) => (client.text += chunk.toString('latin1')));
  socket.on('error', (error) => (client.error = error));
  socket.on('close', () => (client.closed = true));
  return client;
}

/** Polls `condition` every 5 ms until it holds: for what the relay's own events do not cover (the far ends' sockets). */
async function until(condition: () => boolean, what: string, timeoutMs = 10_000): Promise<void> {
  for (const start = performance.now(); !condition(); await new Promise((r) => setTimeout(r, 5))) {
    if (performance.now() - start > timeoutMs) throw new Error(`timed out waiting for ${what}`);
  }
}

const cleanups: Array<() => Promise<void> | void> = [];
afterEach(async () => {
  for (const cleanup of cleanups.splice(0).reverse()) await cleanup();
});

async function setUp(options: { maxLogLines?: number; maxLineChars?: number } = {}): Promise<{ upstream: Upstream; relay: FaultRelay; client: Client }> {
  const upstream = await startUpstream();
  cleanups.push(() => upstream.close());
  const relay = await startFaultRelay({ upstream: { port: upstream.port }, ...options });
  cleanups.push(() => relay.close());
  const client = connectClient(relay.port);
  cleanups.push(() => void client.socket.destroy());
  await until(() => upstream.sockets.length === 1 && relay.openConnections === 1, 'the first connection');
  return { upstream, relay, client };
}

describe('startFaultRelay', () => {
  it('listens on 127.0.0.1 and passes lines both ways unchanged, CR and odd bytes included, logging each', async () => {
    const { upstream, relay, client } = await setUp();
    expect(relay.port).toBeGreaterThan(0);
    expect((client.socket.address() as AddressInfo).address).toBe('127.0.0.1');
    client.socket.write('SHUTTER TiO2 OPEN 1\r\nSHUTTER Ti');
    client.socket.write('O2 CLOSE 1\n');
    (upstream.sockets[0] as Socket).write(Buffer.from('OPT,0.100,0.912345\nXTL,0.100,5987654.321\n\xe9\xff\n', 'latin1'));
    await relay.waitFor(() => relay.seen === 5, 'five lines');
    await until(() => upstream.received[0] === 'SHUTTER TiO2 OPEN 1\r\nSHUTTER TiO2 CLOSE 1\n', 'the commands upstream');
    await until(() => client.text === 'OPT,0.100,0.912345\nXTL,0.100,5987654.321\n\xe9\xff\n', 'the readings at the client');
    expect(relay.lines('toUpstream').map((e) => e.line)).toEqual(['SHUTTER TiO2 OPEN 1\r', 'SHUTTER TiO2 CLOSE 1']);
    expect(relay.lines('toClient').map((e) => [e.line, e.sent])).toEqual([
      ['OPT,0.100,0.912345', ['OPT,0.100,0.912345']],
      ['XTL,0.100,5987654.321', ['XTL,0.100,5987654.321']],
      ['\xe9\xff', ['\xe9\xff']],
    ]);
    expect(relay.log.map((e) => e.seq)).toEqual([...relay.log.map((e) => e.seq)].sort((a, b) => a - b));
    for (const entry of relay.log) {
      expect(entry.connection).toBe(1);
      expect(entry.partial).toBe(false);
      expect(Math.abs(entry.atMs - Date.now())).toBeLessThan(60_000);
    }
  });

  it('transforms lines to the upstream: drops SHUTTER … CLOSE, corrupts one, injects one', async () => {
    const { upstream, relay, client } = await setUp();
    relay.toUpstream.transform = (line) => {
      if (/^SHUTTER \S+ CLOSE/.test(line)) return null;
      if (line.includes('OPEN 2')) return [line, 'SHUTTER SiO2 OPEN 99'];
      return line.replace('OPEN', 'OPNE');
    };
    client.socket.write('SHUTTER TiO2 OPEN 1\nSHUTTER TiO2 CLOSE 1\nSHUTTER SiO2 OPEN 2\n');
    await until(() => upstream.received[0] === 'SHUTTER TiO2 OPNE 1\nSHUTTER SiO2 OPEN 2\nSHUTTER SiO2 OPEN 99\n', 'the transformed commands');
    expect(relay.lines('toUpstream').map((e) => e.sent)).toEqual([['SHUTTER TiO2 OPNE 1'], [], ['SHUTTER SiO2 OPEN 2', 'SHUTTER SiO2 OPEN 99']]);
    // Taken off again, lines pass as they are.
    relay.toUpstream.transform = undefined;
    client.socket.write('SHUTTER SiO2 CLOSE 2\n');
    await until(() => upstream.received[0]?.endsWith('OPEN 99\nSHUTTER SiO2 CLOSE 2\n') === true, 'the untouched command');
  });

  it('transforms lines to the client: drops ACK lines, keeps readings', async () => {
    const { upstream, relay, client } = await setUp();
    relay.toClient.transform = (line) => (line.startsWith('ACK ') ? null : line);
    (upstream.sockets[0] as Socket).write('OPT,1.000,0.5\nACK TiO2 CLOSE 1.000\nOPT,1.100,0.6\n');
    await relay.waitForLine('toClient', (line) => line === 'OPT,1.100,0.6', { afterSeq: 0 });
    await until(() => client.text === 'OPT,1.000,0.5\nOPT,1.100,0.6\n', 'the readings without the ACK');
    expect(relay.lines('toClient').find((e) => e.line.startsWith('ACK'))?.sent).toEqual([]);
  });

  it('delays lines by at least delayMs and keeps their order when the delay changes', async () => {
    const { upstream, relay, client } = await setUp();
    relay.toUpstream.delayMs = 300;
    client.socket.write('first\n');
    await relay.waitForLine('toUpstream', (line) => line === 'first', { afterSeq: 0 });
    relay.toUpstream.delayMs = 0;
    client.socket.write('second\n');
    await until(() => upstream.received[0] === 'first\nsecond\n', 'both lines, in order');
    const logged = relay.lines('toUpstream').find((e) => e.line === 'first')?.atMs as number;
    const arrived = upstream.arrivedAtMs[0]?.find((a) => a.text.startsWith('first'))?.atMs as number;
    // A timer may fire a millisecond early; under load it only fires later.
    expect(arrived - logged).toBeGreaterThanOrEqual(295);
  });

  it('dropConnection destroys both sides; the next client is relayed afresh', async () => {
    const { upstream, relay, client } = await setUp();
    relay.dropConnection();
    await until(() => client.closed && upstream.ended[0] === true, 'both sides closed');
    await relay.waitFor(() => relay.openConnections === 0, 'no open connection');
    const again = connectClient(relay.port);
    cleanups.push(() => void again.socket.destroy());
    await until(() => relay.openConnections === 1 && upstream.sockets.length === 2, 'the second connection');
    again.socket.write('after\n');
    (upstream.sockets[1] as Socket).write('back\n');
    await until(() => upstream.received[1] === 'after\n' && again.text === 'back\n', 'lines on the new connection');
    expect(relay.connections).toBe(2);
    expect(relay.lines('toUpstream').at(-1)?.connection).toBe(2);
  });

  it("dropConnection('reset') resets the client's connection (ECONNRESET), where the default closes it cleanly", async () => {
    const { relay, client } = await setUp();
    relay.dropConnection('reset');
    await until(() => client.closed, 'the client closed');
    expect((client.error)?.code).toBe('ECONNRESET');
    const again = connectClient(relay.port);
    cleanups.push(() => void again.socket.destroy());
    await relay.waitFor(() => relay.openConnections === 1, 'the second connection');
    relay.dropConnection();
    await until(() => again.closed, 'the second client closed');
    expect(again.error).toBeUndefined();
  });

  it("refuseConnections(true) accepts and closes new clients; the current one and the upstream stay; false lets them in again", async () => {
    const { upstream, relay, client } = await setUp();
    await relay.refuseConnections(true);
    const turned = connectClient(relay.port);
    await until(() => turned.closed, 'the refused client closed');
    expect(turned.text).toBe('');
    expect(relay.refused).toBe(1);
    expect(upstream.sockets).toHaveLength(1);
    client.socket.write('still here\n');
    await until(() => upstream.received[0] === 'still here\n', 'the current connection working');
    await relay.refuseConnections(false);
    const later = connectClient(relay.port);
    cleanups.push(() => void later.socket.destroy());
    await until(() => upstream.sockets.length === 2, 'the later client relayed');
  });

  it("refuseConnections(true, 'unlisten') has new clients refused by the system, then listens on the same port again", async () => {
    const { upstream, relay } = await setUp();
    await relay.refuseConnections(true, 'unlisten');
    const turned = connectClient(relay.port);
    await until(() => turned.closed, 'the refused connection');
    expect(turned.error?.code).toBe('ECONNREFUSED');
    await relay.refuseConnections(false);
    const later = connectClient(relay.port);
    cleanups.push(() => void later.socket.destroy());
    await until(() => upstream.sockets.length === 2, 'a client on the same port again');
    expect(later.error).toBeUndefined();
  });

  it('passes a half-close on after the lines before it, and an unterminated last line as partial', async () => {
    const { upstream, relay, client } = await setUp();
    client.socket.end('last\nno newline');
    await until(() => upstream.ended[0] === true, 'the end upstream');
    expect(upstream.received[0]).toBe('last\nno newline');
    expect(relay.lines('toUpstream').map((e) => [e.line, e.partial])).toEqual([
      ['last', false],
      ['no newline', true],
    ]);
  });

  it('closes the client when the upstream refuses the connection', async () => {
    const upstream = await startUpstream();
    await upstream.close(); // its port now refuses
    const relay = await startFaultRelay({ upstream: { port: upstream.port } });
    cleanups.push(() => relay.close());
    const client = connectClient(relay.port);
    await until(() => client.closed, 'the client closed');
    await relay.waitFor(() => relay.openConnections === 0, 'no open connection');
  });

  it('keeps the log bounded and splits an overlong line into partial pieces', async () => {
    const { upstream, relay, client } = await setUp({ maxLogLines: 10, maxLineChars: 16 });
    client.socket.write(Array.from({ length: 50 }, (_, i) => `line ${i}\n`).join(''));
    await relay.waitFor(() => relay.seen === 50, 'fifty lines');
    expect(relay.log.length).toBeLessThanOrEqual(11);
    expect(relay.log.at(-1)?.line).toBe('line 49');
    expect(relay.log.at(-1)?.seq).toBe(50);
    client.socket.write('x'.repeat(40));
    await relay.waitFor(() => relay.seen === 52, 'two pieces of the long line');
    expect(relay.log.slice(-2).map((e) => [e.line.length, e.partial])).toEqual([
      [16, true],
      [16, true],
    ]);
    await until(() => upstream.received[0]?.endsWith('line 49\n' + 'x'.repeat(32)) === true, 'the pieces upstream');
  });

  it('close() ends every connection and any wait, and refuses nothing afterwards by hanging', async () => {
    const { upstream, relay, client } = await setUp();
    const waiting = relay.waitForLine('toClient', () => true, { timeoutMs: 60_000 });
    await relay.close();
    await expect(waiting).rejects.toThrow(/closed while waiting/);
    await until(() => client.closed && upstream.ended[0] === true, 'both sides closed');
    const late = connectClient(relay.port);
    await until(() => late.closed, 'a late client turned away');
    expect(late.error?.code).toBe('ECONNREFUSED');
  });

  it('waitForLine times out with a sentence naming the direction', async () => {
    const { relay } = await setUp();
    await expect(relay.waitForLine('toUpstream', () => true, { timeoutMs: 50 })).rejects.toThrow('fault relay: timed out after 50 ms waiting for a matching line toUpstream');
  });
});
