// The TCP transport against a real node:net server on 127.0.0.1 (port 0: the system picks one):
// bytes both ways, a refused connection, the server dropping the connection and the line
// source reconnecting, and shutter commands and acknowledgements over the same socket.
import { createServer, type Server, type Socket } from 'node:net';
import type { AddressInfo } from 'node:net';
import { afterEach, describe, expect, it } from 'vitest';
import { createLineSource, type LineSource } from '../../drivers/line-source.ts';
import { createShutterOutput } from '../../drivers/shutter-output.ts';
import { createTcpTransport } from '../../drivers/transport.ts';
import type { Fault, InstrumentReading, ShutterAck, ShutterFault, SourceStatus } from '../../src/pipeline/types.ts';

/** A test instrument: records what it received, and can speak and hang up. */
interface FakeInstrument {
  readonly server: Server;
  readonly port: number;
  readonly sockets: Socket[];
  readonly received: string[];
  /** Resolves with the next connection (or the current one if it has not been taken yet). */
  nextConnection(): Promise<Socket>;
  stop(): Promise<void>;
}

async function startInstrument(port = 0): Promise<FakeInstrument> {
  const sockets: Socket[] = [];
  const received: string[] = [];
  const waiting: Array<(socket: Socket) => void> = [];
  let unclaimed: Socket[] = [];
  const server = createServer((socket) => {
    sockets.push(socket);
    socket.on('data', (chunk) => received.push(chunk.toString('utf8')));
    socket.on('error', () => undefined);
    const waiter = waiting.shift();
    if (waiter) waiter(socket);
    else unclaimed.push(socket);
  });
  await new Promise<void>((resolve) => server.listen(port, '127.0.0.1', resolve));
  return {
    server,
    port: (server.address() as AddressInfo).port,
    sockets,
    received,
    nextConnection() {
      const ready = unclaimed.shift();
      if (ready) return Promise.resolve(ready);
      return new Promise((resolve) => waiting.push(resolve));
    },
    async stop() {
      for (const socket of sockets) socket.destroy();
      unclaimed = [];
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}

async function until(condition: () => boolean, what: string, timeoutMs = 3000): Promise<void> {
  const start = performance.now();
  while (!condition()) {
    if (performance.now() - start > timeoutMs) throw new Error(`timed out waiting for ${what}`);
    await new Promise((resolve) => setTimeout(resolve, 2));
  }
}

const cleanups: Array<() => Promise<void>> = [];
afterEach(async () => {
  for (const cleanup of cleanups.splice(0).reverse()) await cleanup();
});

function watch(source: LineSource) {
  const readings: Array<InstrumentReading | Fault> = [];
  const statuses: SourceStatus[] = [];
  source.readings.subscribe((r) => readings.push(r));
  source.status.subscribe((s) => statuses.push(s));
  return { readings, statuses };
}

describe('createTcpTransport', () => {
  it('carries bytes both ways and reports the end of the connection once', async () => {
    const instrument = await startInstrument();
    cleanups.push(() => instrument.stop());
    const transport = createTcpTransport({ host: '127.0.0.1', port: instrument.port });
    expect(transport.description).toBe(`tcp 127.0.0.1:${instrument.port}`);
    const chunks: string[] = [];
    const closes: Array<Error | undefined> = [];
    transport.on('data', (chunk) => chunks.push(Buffer.from(chunk).toString()));
    transport.on('close', (error) => closes.push(error));
    await transport.open();
    const socket = await instrument.nextConnection();
    await transport.write('SHUTTER SiO2 OPEN 1\n');
    await until(() => instrument.received.join('') === 'SHUTTER SiO2 OPEN 1\n', 'the command at the server');
    socket.write('OPT,1,0.5\n');
    await until(() => chunks.join('') === 'OPT,1,0.5\n', 'the line at the client');
    socket.end();
    await until(() => closes.length === 1, 'the close event');
    expect(closes).toEqual([undefined]);
    await expect(transport.write('late\n')).rejects.toThrow(/not open/);
    await transport.close();
    expect(closes).toHaveLength(1);
    await expect(transport.open()).rejects.toThrow(/opens once/);
  });

  it('rejects open() when nothing listens', async () => {
    const instrument = await startInstrument();
    const port = instrument.port;
    await instrument.stop();
    const transport = createTcpTransport({ host: '127.0.0.1', port });
    await expect(transport.open()).rejects.toThrow(/ECONNREFUSED/);
    await transport.close();
  });

  it('refuses bad settings, naming them', () => {
    expect(() => createTcpTransport({ host: '127.0.0.1', port: 70_000 })).toThrow(/port/);
    expect(() => createTcpTransport({ host: '', port: 7301 })).toThrow(/host/);
    expect(() => createTcpTransport({ host: 'h', port: 1, timeoutMs: 5 } as never)).toThrow(/timeoutMs/);
  });
});

describe('createLineSource over TCP', () => {
  it('reads lines, reconnects when the server drops the connection, and when it comes back', async () => {
    let instrument = await startInstrument();
    const port = instrument.port;
    const source = createLineSource({
      transport: () => createTcpTransport({ host: '127.0.0.1', port, connectTimeoutMs: 1000 }),
      retry: { initialDelayMs: 10, maxDelayMs: 40, factor: 2 },
    });
    cleanups.push(() => instrument.stop());
    cleanups.push(() => source.close());
    const { readings, statuses } = watch(source);

    let socket = await instrument.nextConnection();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');
    socket.write('OPT,1.0,0.30\nXTL,1.0,5990000\n');
    await until(() => readings.length === 2, 'two readings');

    // The server hangs up on us: lost, then a new connection after the back-off.
    socket.destroy();
    socket = await instrument.nextConnection();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected again');
    expect(statuses.some((s) => s.state === 'lost' && !s.closedByUs && /closed by the other end; retrying in 10 ms/.test(s.detail ?? ''))).toBe(true);
    socket.write('OPT,2.0,0.31\n');
    await until(() => readings.length === 3, 'a reading on the new connection');

    // The server goes away entirely: refused attempts, then it listens again on the same port.
    await instrument.stop();
    await until(() => statuses.filter((s) => s.state === 'lost' && /ECONNREFUSED/.test(s.detail ?? '')).length >= 2, 'refused attempts');
    instrument = await startInstrument(port);
    socket = await instrument.nextConnection();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected to the new server');
    socket.write('XTL,3.0,5989000\n');
    await until(() => readings.length === 4, 'a reading from the new server');
    expect(readings.map((r) => (r.kind === 'fault' ? r.code : `${r.channel}@${r.timeS}`))).toEqual(['optical@1', 'crystal@1', 'optical@2', 'crystal@3']);
  });

  it('shares the socket with the shutter output: commands out, acknowledgements in', async () => {
    const instrument = await startInstrument();
    const source = createLineSource({ transport: () => createTcpTransport({ host: '127.0.0.1', port: instrument.port }) });
    cleanups.push(() => instrument.stop());
    cleanups.push(() => source.close());
    const shutter = createShutterOutput({ link: source, ack: { timeoutMs: 300 } });
    const acks: ShutterAck[] = [];
    const faults: ShutterFault[] = [];
    shutter.acks.subscribe((a) => acks.push(a));
    shutter.faults.subscribe((f) => faults.push(f));
    const { readings, statuses } = watch(source);
    const socket = await instrument.nextConnection();
    await until(() => statuses.at(-1)?.state === 'connected', 'connected');

    shutter.send({ kind: 'shutter', action: 'close', source: 'Ta2O5', layer: 3, timeS: 41.5 });
    await until(() => instrument.received.join('') === 'SHUTTER Ta2O5 CLOSE 3\n', 'the command');
    socket.write('OPT,41.6,0.7\nACK Ta2O5 CLOSE 41.62\n');
    await until(() => acks.length === 1, 'the acknowledgement');
    expect(acks[0]).toEqual({ kind: 'shutter-ack', action: 'close', source: 'Ta2O5', timeS: 41.62 });
    // The ACK line is not a reading and not a fault for the reading source.
    expect(readings).toHaveLength(1);
    await new Promise((resolve) => setTimeout(resolve, 350));
    expect(faults).toEqual([]);
    shutter.close();
  });
});
