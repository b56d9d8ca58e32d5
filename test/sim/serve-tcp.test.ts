// The virtual chamber served over TCP: a host whose connection ends (dropped by the fault relay,
// closed, reset or half-closed) reconnects to the same run, chamber time going on; a second host
// is turned away while the first reads, and takes the place of one that stopped reading.
import { connect, type Socket } from 'node:net';
import { afterEach, describe, expect, it } from 'vitest';
import { createLineSource } from '../../drivers/line-source.ts';
import { createTcpTransport } from '../../drivers/transport.ts';
import type { Reading, SourceStatus } from '../../src/pipeline/types.ts';
import { serveOnTcp, SimProfileSchema, type TcpServedChamber } from '../../sim/index.ts';
import { startFaultRelay } from '../support/fault-relay.ts';
import { profiles, recipes } from './support.ts';

/** A host on the wire: the lines it received, the reading times among them, and how it ended. */
interface Host {
  readonly socket: Socket;
  readonly lines: string[];
  readonly readingTimesS: number[];
  closed: boolean;
}

function connectHost(port: number): Host {
  const socket = connect({ host: '127.0.0.1', port });
  const host: Host = { socket, lines: [], readingTimesS: [], closed: false };
  let pending = '';
  socket.on('data', (chunk: Buffer) => {
    pending += chunk.toString('latin1');
    const parts = pending.split('\n');
    pending = parts.pop() as string;
    for (const line of parts) {
      host.lines.push(line);
      const reading = /^(?:OPT|XTL),(\d+\.\d+),/.exec(line);
      if (reading) host.readingTimesS.push(Number(reading[1]));
    }
  });
  socket.on('error', () => undefined);
  socket.on('close', () => (host.closed = true));
  cleanups.push(() => void socket.destroy());
  return host;
}

async function until(condition: () => boolean, what: string, timeoutMs = 20_000): Promise<void> {
  for (const start = performance.now(); !condition(); await new Promise((r) => setTimeout(r, 10))) {
    if (performance.now() - start > timeoutMs) throw new Error(`timed out waiting for ${what}`);
  }
}

const cleanups: Array<() => Promise<void> | void> = [];
afterEach(async () => {
  for (const cleanup of cleanups.splice(0).reverse()) await cleanup();
});

async function serve(options: { speed?: number; staleAfterMs?: number } = {}): Promise<TcpServedChamber> {
  const served = await serveOnTcp({ recipe: recipes.ar4, profile: profiles.ideal, seed: 3, speed: options.speed ?? 20, port: 0, ...(options.staleAfterMs === undefined ? {} : { staleAfterMs: options.staleAfterMs }) });
  cleanups.push(() => served.close());
  return served;
}

/** Reads until `count` readings have come, and returns the latest reading time. */
async function readings(host: Host, count: number): Promise<number> {
  await until(() => host.readingTimesS.length >= count, `${count} readings`);
  return Math.max(...host.readingTimesS);
}

/** The host's connection is ended one way; a new host connects at once and must be served the same run. */
async function expectReconnectServed(end: (host: Host) => void | Promise<void>, port: number, served: TcpServedChamber): Promise<void> {
  const first = connectHost(port);
  const lastBeforeS = await readings(first, 20);
  const chamber = (await served.served).chamber;
  await end(first);
  const second = connectHost(port);
  await readings(second, 20);
  expect(second.lines.filter((line) => line.startsWith('ERROR'))).toEqual([]);
  // The same run, later: its readings carry on from where the first host's stopped.
  expect(Math.min(...second.readingTimesS)).toBeGreaterThanOrEqual(lastBeforeS);
  expect((await served.served).chamber).toBe(chamber);
  expect(served.hostConnections).toBe(2);
  // And the reconnected host drives the chamber.
  second.socket.write('SHUTTER TiO2 OPEN 1\n');
  await until(() => second.lines.some((line) => /^ACK TiO2 OPEN \d+\.\d{3}$/.test(line)), 'the acknowledgement on the new connection');
  expect((await served.served).applied.map((c) => [c.source, c.action, c.layer])).toEqual([['TiO2', 'open', 1]]);
}

describe('serveOnTcp: a host reconnecting', () => {
  it('is served the same run after the fault relay drops its connection', async () => {
    const served = await serve();
    const relay = await startFaultRelay({ upstream: { port: served.port } });
    cleanups.push(() => relay.close());
    await expectReconnectServed(async (host) => {
      relay.dropConnection();
      await until(() => host.closed, 'the dropped connection closed');
    }, relay.port, served);
    expect(relay.connections).toBe(2);
  });

  it('is served after it closed its socket and reconnected at once', async () => {
    const served = await serve();
    await expectReconnectServed((host) => void host.socket.destroy(), served.port, served);
  });

  it('is served after its connection was reset', async () => {
    const served = await serve();
    await expectReconnectServed((host) => void host.socket.resetAndDestroy(), served.port, served);
  });

  it('is served after it half-closed its connection', async () => {
    const served = await serve();
    await expectReconnectServed(async (host) => {
      host.socket.end();
      await until(() => host.closed, 'the chamber ending its side too');
    }, served.port, served);
  });
});

describe("serveOnTcp with fringe's own TCP link", () => {
  it('the link reconnects through the relay after a drop and while the link was down, to the same run', async () => {
    const served = await serve();
    const relay = await startFaultRelay({ upstream: { port: served.port } });
    cleanups.push(() => relay.close());
    const source = createLineSource({
      transport: () => createTcpTransport({ host: '127.0.0.1', port: relay.port, connectTimeoutMs: 2000 }),
      retry: { initialDelayMs: 20, maxDelayMs: 100, factor: 2 },
    });
    cleanups.push(() => source.close());
    const readings: Reading[] = [];
    const statuses: SourceStatus[] = [];
    source.readings.subscribe((r) => {
      if (r.kind === 'reading') readings.push(r);
    });
    source.status.subscribe((s) => statuses.push(s));
    await until(() => readings.length >= 20, 'readings over the first connection');
    // Link down: the connection cut and new ones refused for a while, then up again.
    await relay.refuseConnections(true);
    relay.dropConnection();
    await relay.waitFor(() => relay.refused >= 2, 'the link retrying while refused');
    const lastBeforeS = Math.max(...readings.map((r) => r.timeS));
    const countBefore = readings.length;
    await relay.refuseConnections(false);
    await until(() => readings.length >= countBefore + 20, 'readings after the reconnection');
    const after = readings.slice(countBefore);
    expect(Math.min(...after.map((r) => r.timeS))).toBeGreaterThan(lastBeforeS);
    expect(relay.lines('toClient').some((e) => e.line.startsWith('ERROR'))).toBe(false);
    expect(served.hostConnections).toBe(2);
    expect(statuses.some((s) => s.state === 'lost')).toBe(true);
  });
});

describe('serveOnTcp: a second host', () => {
  it('is told ERROR busy while the first reads, and the first is served on', async () => {
    const served = await serve();
    const first = connectHost(served.port);
    await readings(first, 10);
    const second = connectHost(served.port);
    await until(() => second.closed, 'the second host turned away');
    expect(second.lines).toEqual(['ERROR busy: one host at a time']);
    const seen = first.readingTimesS.length;
    await readings(first, seen + 10);
    expect(first.closed).toBe(false);
    expect(served.hostConnections).toBe(1);
  });

  it('takes the place of a host that stopped reading (a dead peer behind a half-open connection)', async () => {
    // Fast, so that the unread lines fill the socket buffers (a few MB on loopback) in seconds.
    const served = await serve({ speed: 2000, staleAfterMs: 100 });
    const silent = connectHost(served.port);
    silent.socket.pause();
    let newcomer: Host | undefined;
    let busy = 0;
    await until(
      () => {
        if (newcomer?.lines.some((line) => line.startsWith('OPT,'))) return true;
        if (newcomer === undefined || newcomer.closed) {
          if (newcomer?.lines[0]?.startsWith('ERROR busy')) busy++;
          newcomer?.socket.destroy();
          newcomer = connectHost(served.port);
        }
        return false;
      },
      'a newcomer served in place of the silent host',
      60_000,
    );
    // While the silent host's buffers were filling, it kept its place.
    expect(busy).toBeGreaterThan(0);
    // Reading again, it finds its connection ended by the chamber.
    silent.socket.resume();
    await until(() => silent.closed, 'the silent host disconnected');
  });
});

describe('a chamber with a spectral monitor, over TCP', () => {
  it('tells each host its grid first and again every 50 spectra, in the profile’s form', async () => {
    for (const form of ['table', 'json'] as const) {
      const profile = SimProfileSchema.parse({ ...profiles.ideal, spectral: { form, resolutionNm: 0 } });
      const served = await serveOnTcp({ recipe: recipes.ar4, profile, seed: 3, speed: 50, port: 0 });
      cleanups.push(() => served.close());
      const host = connectHost(served.port);
      const isHeader = (line: string): boolean => (form === 'table' ? line.startsWith('SPW,') : line.includes('"nm":'));
      const isSpectrum = (line: string): boolean => (form === 'table' ? line.startsWith('SPC,') : line.includes('"v":'));
      await until(() => host.lines.filter(isSpectrum).length >= 120, '120 spectra');
      const spectral = host.lines.filter((l) => isHeader(l) || isSpectrum(l));
      expect(isHeader(spectral[0] as string)).toBe(true);
      // The connection’s header, spectra 1–49, the header before the 50th, spectra 50–99, the header before the 100th, …
      const headersAt = spectral.flatMap((l, i) => (isHeader(l) ? [i] : []));
      expect(headersAt.slice(0, 3)).toEqual([0, 50, 101]);
      expect(new Set(spectral.filter(isHeader)).size).toBe(1);
      host.socket.destroy();
    }
  });
});
