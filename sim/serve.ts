/**
 * The virtual chamber as instruments on a wire: readings go out as fringe's line format over a
 * pseudo-terminal or a TCP connection, shutter commands come back and are acknowledged, at a set
 * multiple of real time. The real serial (or socket) path of fringe is thereby exercised end to
 * end without hardware.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { existsSync } from 'node:fs';
import { createServer, type Server, type Socket } from 'node:net';
import type { Duplex } from 'node:stream';
import { SerialPort } from 'serialport';
import type { ResolvedRecipe } from '../src/model/plan/recipe.ts';
import type { ShutterCommand } from '../src/pipeline/types.ts';
import { formatAck, formatReading, parseShutterCommand } from './line-format.ts';
import type { SimProfile } from './profile.ts';
import { createVirtualChamber, type VirtualChamber } from './virtual-chamber.ts';

export interface ServeOptions {
  recipe: ResolvedRecipe;
  profile: SimProfile;
  seed: number;
  /** Multiple of real time (default 1). */
  speed?: number;
  /** How often the chamber is advanced and its lines written, ms of wall time (default 20). */
  periodMs?: number;
}

export interface ServedChamber {
  readonly chamber: VirtualChamber;
  /** Every command received and the chamber time it took effect at. */
  readonly applied: readonly ShutterCommand[];
  /** Lines from the host that were not commands. */
  readonly refusedLines: readonly string[];
  close(): Promise<void>;
}

/**
 * Serves the chamber on one byte stream (an open pseudo-terminal or a socket). The chamber's
 * clock starts now; readings are written as they fall due.
 */
export function serveOnStream(stream: Duplex, options: ServeOptions): ServedChamber {
  const chamber = createVirtualChamber(options.recipe, options.profile, options.seed);
  const speed = options.speed ?? 1;
  const applied: ShutterCommand[] = [];
  const refusedLines: string[] = [];
  const startMs = performance.now();
  let pending = '';
  const onData = (chunk: Buffer): void => {
    pending += chunk.toString('latin1');
    let nl: number;
    while ((nl = pending.indexOf('\n')) >= 0) {
      const line = pending.slice(0, nl).replace(/\r$/, '');
      pending = pending.slice(nl + 1);
      if (line === '') continue;
      const parsed = parseShutterCommand(line, chamber.timeS);
      if (parsed.kind === 'shutter') {
        chamber.command(parsed);
        applied.push(parsed);
      } else refusedLines.push(line);
    }
    if (pending.length > 4096) pending = '';
  };
  stream.on('data', onData);
  stream.on('error', () => undefined); // a vanished host: keep the chamber going, as a real one would
  const timer = setInterval(() => {
    const untilS = ((performance.now() - startMs) / 1000) * speed;
    const lines: string[] = [];
    chamber.advance(untilS, (reading) => lines.push(formatReading(reading)));
    for (const ack of chamber.takeAcks()) lines.push(formatAck(ack));
    if (lines.length > 0 && stream.writable) stream.write(lines.join(''));
  }, options.periodMs ?? 20);
  return {
    chamber,
    applied,
    refusedLines,
    close: async () => {
      clearInterval(timer);
      stream.off('data', onData);
      await new Promise<void>((resolve) => stream.end(resolve));
    },
  };
}

export interface PtyPair {
  /** The side fringe reads (give this path to the chamber file). */
  readonly hostPath: string;
  /** The side the virtual chamber writes. */
  readonly chamberPath: string;
  close(): void;
}

/**
 * Makes a pseudo-terminal pair with Debian's `socat` (raw, no echo), linked at `basePath` (the
 * host's side) and `basePath-chamber`, and waits until both exist.
 */
export async function createPtyPair(basePath: string): Promise<PtyPair> {
  const chamberPath = `${basePath}-chamber`;
  let child: ChildProcess;
  try {
    child = spawn('socat', [`pty,raw,echo=0,link=${chamberPath}`, `pty,raw,echo=0,link=${basePath}`], { stdio: 'ignore' });
  } catch (error) {
    throw new Error(`cannot start socat for a pseudo-terminal pair: ${(error as Error).message}`, { cause: error });
  }
  const failed = new Promise<never>((_, reject) => {
    child.once('error', (error) => reject(new Error(`cannot start socat (is the Debian package socat installed?): ${error.message}`)));
    child.once('exit', (code) => reject(new Error(`socat ended with code ${code} before the pair was ready`)));
  });
  const ready = (async () => {
    for (let i = 0; i < 200 && !(existsSync(basePath) && existsSync(chamberPath)); i++) await new Promise((r) => setTimeout(r, 10));
    if (!(existsSync(basePath) && existsSync(chamberPath))) throw new Error('socat made no pseudo-terminal pair within 2 s');
  })();
  await Promise.race([ready, failed]);
  failed.catch(() => undefined);
  return { hostPath: basePath, chamberPath, close: () => void child.kill() };
}

/** Serves the chamber on the chamber side of a pseudo-terminal pair. */
export async function serveOnPty(pair: PtyPair, options: ServeOptions): Promise<ServedChamber> {
  const port = new SerialPort({ path: pair.chamberPath, baudRate: 115200, autoOpen: false });
  await new Promise<void>((resolve, reject) => port.open((error) => (error ? reject(error) : resolve())));
  return serveOnStream(port, options);
}

/**
 * Serves the chamber to one TCP client at a time on `host:port` (port 0: any free port); the
 * chamber's clock starts with the first client.
 */
export async function serveOnTcp(
  options: ServeOptions & { host?: string; port: number },
): Promise<{ server: Server; port: number; served: Promise<ServedChamber>; close(): Promise<void> }> {
  let current: ServedChamber | undefined;
  let resolveServed: (s: ServedChamber) => void = () => undefined;
  const served = new Promise<ServedChamber>((resolve) => (resolveServed = resolve));
  const server = createServer((socket: Socket) => {
    if (current) {
      socket.end('ERROR busy: one host at a time\n');
      return;
    }
    socket.setNoDelay(true);
    current = serveOnStream(socket, options);
    resolveServed(current);
  });
  await new Promise<void>((resolve) => server.listen(options.port, options.host ?? '127.0.0.1', resolve));
  const address = server.address();
  return {
    server,
    port: typeof address === 'object' && address ? address.port : options.port,
    served,
    close: async () => {
      await current?.close();
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}
