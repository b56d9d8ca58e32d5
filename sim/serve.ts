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
import { formatAck, formatReading, formatSpectrum, formatSpectrumHeader, parseShutterCommand } from './line-format.ts';
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

/** Bytes a host may leave unread before the chamber drops its lines, as a full output buffer of an instrument would. */
const MAX_UNREAD_BYTES = 1024 * 1024;
/** The spectral grid's header is written again before every this many spectra (and to each host that connects). */
const SPECTRA_PER_HEADER = 50;
/** How long closing waits for a host to take the chamber's last lines, ms. */
const CLOSE_GRACE_MS = 1000;
/** Longest partial line kept from the host. */
const MAX_PENDING_CHARS = 4096;

/** One host's byte stream, attached to a running chamber. */
interface HostLink {
  readonly stream: Duplex;
  /** performance.now() when the host stopped reading what the chamber writes (undefined: it reads). */
  unreadSinceMs: number | undefined;
  detach(): void;
}

/**
 * A chamber running on wall time at `speed`, writing its lines to whichever host stream is
 * attached. With none attached the chamber goes on (readings and acknowledgements are lost, as
 * on a cut cable), so a host that reconnects finds the same run, later.
 */
function startChamberOnWire(options: ServeOptions) {
  const chamber = createVirtualChamber(options.recipe, options.profile, options.seed);
  const speed = options.speed ?? 1;
  const applied: ShutterCommand[] = [];
  const refusedLines: string[] = [];
  const spectralForm = options.profile.spectral?.form;
  let spectraSent = 0;
  const startMs = performance.now();
  let host: HostLink | undefined;

  const attach = (stream: Duplex): HostLink => {
    host?.detach();
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
      if (pending.length > MAX_PENDING_CHARS) pending = '';
    };
    const onDrain = (): void => {
      link.unreadSinceMs = undefined;
    };
    const ignoreError = (): void => undefined; // a vanished host: keep the chamber going, as a real one would
    stream.on('data', onData);
    stream.on('drain', onDrain);
    stream.on('error', ignoreError);
    const link: HostLink = {
      stream,
      unreadSinceMs: undefined,
      detach: () => {
        stream.off('data', onData);
        stream.off('drain', onDrain);
        if (host === link) host = undefined;
      },
    };
    host = link;
    // A host that connects learns the spectral grid first, as from a spectrometer's first frame.
    if (spectralForm && chamber.spectralGridNm) stream.write(formatSpectrumHeader(chamber.spectralGridNm, spectralForm));
    return link;
  };

  const timer = setInterval(() => {
    const untilS = ((performance.now() - startMs) / 1000) * speed;
    const lines: string[] = [];
    chamber.advance(
      untilS,
      (reading) => lines.push(formatReading(reading)),
      spectralForm
        ? (spectrum) => {
            // The grid again every so often, as spectrometers on serial lines do: a host that
            // opened its port late (a pseudo-terminal drops what nobody read) still learns it.
            if (++spectraSent % SPECTRA_PER_HEADER === 0) lines.push(formatSpectrumHeader(spectrum.wavelengthsNm, spectralForm));
            lines.push(formatSpectrum(spectrum, spectralForm));
          }
        : undefined,
    );
    for (const ack of chamber.takeAcks()) lines.push(formatAck(ack));
    const stream = host?.stream;
    if (lines.length === 0 || !host || !stream?.writable) return;
    // A host that stopped reading must not make the chamber's memory grow without end.
    if (stream.writableLength > MAX_UNREAD_BYTES) return;
    if (!stream.write(lines.join('')) && host.unreadSinceMs === undefined) host.unreadSinceMs = performance.now();
  }, options.periodMs ?? 20);

  return {
    chamber,
    applied,
    refusedLines,
    attach,
    get host(): HostLink | undefined {
      return host;
    },
    stop: () => clearInterval(timer),
  };
}

/**
 * Serves the chamber on one byte stream (an open pseudo-terminal or a socket). The chamber's
 * clock starts now; readings are written as they fall due.
 */
export function serveOnStream(stream: Duplex, options: ServeOptions): ServedChamber {
  const wire = startChamberOnWire(options);
  wire.attach(stream);
  return {
    chamber: wire.chamber,
    applied: wire.applied,
    refusedLines: wire.refusedLines,
    close: async () => {
      wire.stop();
      wire.host?.detach();
      // A host that stopped reading leaves the stream full and `end` waiting for ever (a pseudo-
      // terminal nobody reads): what it has not taken in a moment is dropped, as on a cut cable.
      await new Promise<void>((resolve) => {
        const cut = setTimeout(() => {
          stream.destroy();
          resolve();
        }, CLOSE_GRACE_MS);
        stream.end(() => {
          clearTimeout(cut);
          resolve();
        });
      });
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

/** How long a newcomer waits for the connected host's end to be noticed, ms of wall time. */
const RECONNECT_GRACE_MS = 500;

export interface TcpServeOptions extends ServeOptions {
  host?: string;
  port: number;
  /**
   * How long a host must have left the chamber's lines unread before a newer connection may
   * take its place, ms of wall time (default 2000). A host that reads is never displaced.
   */
  staleAfterMs?: number;
}

export interface TcpServedChamber {
  readonly server: Server;
  readonly port: number;
  /** The chamber, once the first host has connected. */
  readonly served: Promise<ServedChamber>;
  /** Connections the chamber has served, reconnections included. */
  readonly hostConnections: number;
  close(): Promise<void>;
}

/**
 * Serves the chamber to one TCP host at a time on `host:port` (port 0: any free port); the
 * chamber's clock starts with the first host and runs on when the host goes (the connection
 * closed, reset or half-closed), so a host that reconnects is served the same run, later.
 *
 * A second host while one is connected is told `ERROR busy` and closed, unless the connected
 * host has stopped reading for `staleAfterMs` (a dead peer behind a half-open connection, whose
 * end the operating system may not notice for many minutes): then the newer connection takes
 * its place. A newcomer first waits a moment (0.5 s) for the connected host's end, which a host
 * reconnecting at once can overtake.
 */
export async function serveOnTcp(options: TcpServeOptions): Promise<TcpServedChamber> {
  const staleAfterMs = options.staleAfterMs ?? 2000;
  let wire: ReturnType<typeof startChamberOnWire> | undefined;
  let hostConnections = 0;
  let resolveServed: (s: ServedChamber) => void = () => undefined;
  const served = new Promise<ServedChamber>((resolve) => (resolveServed = resolve));
  const sockets = new Set<Socket>();
  let closing = false;
  /** Serves `socket`, replaces a stale host with it, or turns it away. */
  const admit = (socket: Socket): void => {
    if (closing || socket.destroyed) {
      socket.destroy();
      return;
    }
    const current = wire?.host;
    if (current) {
      const unreadSinceMs = current.unreadSinceMs;
      if (unreadSinceMs === undefined || performance.now() - unreadSinceMs < staleAfterMs) {
        socket.end('ERROR busy: one host at a time\n');
        return;
      }
      current.detach();
      current.stream.destroy();
    }
    socket.setNoDelay(true);
    if (!wire) {
      wire = startChamberOnWire(options);
      const started = wire;
      resolveServed({
        chamber: started.chamber,
        applied: started.applied,
        refusedLines: started.refusedLines,
        close: async () => {
          started.stop();
          started.host?.stream.destroy();
          started.host?.detach();
          await Promise.resolve();
        },
      });
    }
    hostConnections++;
    const link = wire.attach(socket);
    // Any end of the connection frees the place for the next host; the chamber goes on.
    socket.once('close', () => link.detach());
  };

  const server = createServer((socket: Socket) => {
    sockets.add(socket);
    socket.once('close', () => sockets.delete(socket));
    socket.on('error', () => undefined);
    const current = wire?.host;
    if (!current || closing) {
      admit(socket);
      return;
    }
    // A host that reconnects at once can arrive before the end of its old connection has been
    // read: give that end a moment to come in before calling the chamber busy.
    const decide = (): void => {
      clearTimeout(grace);
      current.stream.off('close', decide);
      admit(socket);
    };
    const grace = setTimeout(decide, RECONNECT_GRACE_MS);
    current.stream.once('close', decide);
  });
  await new Promise<void>((resolve, reject) => {
    server.once('error', reject);
    server.listen(options.port, options.host ?? '127.0.0.1', () => {
      server.off('error', reject);
      resolve();
    });
  });
  const address = server.address();
  return {
    server,
    port: typeof address === 'object' && address ? address.port : options.port,
    served,
    get hostConnections() {
      return hostConnections;
    },
    close: async () => {
      closing = true;
      wire?.stop();
      for (const socket of sockets) socket.destroy();
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}
