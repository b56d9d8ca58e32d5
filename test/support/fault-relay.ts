/**
 * A TCP relay for fault tests: it listens on 127.0.0.1 (a free port), connects each client it
 * accepts to an upstream address (typically the virtual chamber served with `fringe simulate
 * --serve --tcp PORT`, or `serveOnTcp`), and passes lines both ways through hooks the test may
 * change at any moment: drop the connection, refuse new ones, transform (corrupt, inject, drop)
 * or delay lines in either direction. Every line seen is logged with its wall time.
 *
 * Lines are split on LF; the LF is not part of the line handed to a transform, a CR before it
 * is (so a transform sees exactly what was sent). Bytes are read and written as latin1, so
 * anything passes unchanged unless a transform changes it. Everything is bounded: the log keeps
 * the last `maxLogLines` lines, a line longer than `maxLineChars` is passed on in pieces as it
 * stands, and a direction whose delayed lines pile up past `maxQueuedLines` stops reading
 * until they are sent. `close()` ends every connection and the listener.
 */
import { createServer, connect, type AddressInfo, type Socket } from 'node:net';

/** Host → upstream (`toUpstream`, e.g. fringe's SHUTTER commands) or upstream → host (`toClient`, readings and ACK lines). */
export type RelayDirection = 'toUpstream' | 'toClient';

/**
 * What becomes of one line: a string replaces it, a list replaces it with several lines (inject
 * by returning `[line, extra]`), `null` drops it. Each line sent gets its LF back.
 */
export type LineTransform = (line: string) => string | readonly string[] | null;

/** One line the relay received, and what it sent on in its place. */
export interface RelayedLine {
  /** Position in everything the relay has seen, from 1 (kept even when the log drops old lines). */
  readonly seq: number;
  readonly direction: RelayDirection;
  /** Which accepted connection (from 1) carried it. */
  readonly connection: number;
  /** Wall time when it arrived, ms since the epoch. */
  readonly atMs: number;
  /** As received, without its LF (with a CR, if one came before the LF). */
  readonly line: string;
  /** What was sent on (after the transform); empty when the line was dropped. */
  readonly sent: readonly string[];
  /** True for a piece of an overlong line, or the unterminated end of a stream, passed on as it stood. */
  readonly partial: boolean;
}

/** The hooks of one direction; set them at any time, they apply to lines arriving afterwards. */
export interface DirectionHooks {
  transform: LineTransform | undefined;
  /** How long each line is held before it is sent on, ms (order is kept). */
  delayMs: number;
}

export interface FaultRelayOptions {
  upstream: { host?: string; port: number };
  /** Lines kept in the log (default 100,000; the oldest go first). */
  maxLogLines?: number;
  /** Longest line split out, characters (default 65,536). */
  maxLineChars?: number;
  /** Delayed lines held per direction before the relay stops reading it (default 10,000). */
  maxQueuedLines?: number;
}

export interface FaultRelay {
  /** The port to connect to instead of the upstream's. */
  readonly port: number;
  readonly toUpstream: DirectionHooks;
  readonly toClient: DirectionHooks;
  /** The last lines seen, oldest first. */
  readonly log: readonly RelayedLine[];
  /** Lines seen so far (the `seq` of the latest). */
  readonly seen: number;
  /** Clients accepted and relayed so far (refused ones not counted). */
  readonly connections: number;
  /** Clients currently relayed. */
  readonly openConnections: number;
  /** Clients turned away while refusing. */
  readonly refused: number;
  /**
   * Destroys both sides of every current connection now; the next client is relayed afresh.
   * `'close'` (the default) ends them with a FIN, `'reset'` with a TCP reset (RST).
   */
  dropConnection(how?: 'close' | 'reset'): void;
  /**
   * Link down (`true`) or up again (`false`), for new clients only (pair with
   * {@link dropConnection} to cut the current one too). `'close'` (the default) accepts each
   * client and closes it at once; `'unlisten'` stops listening, so a client's connection is
   * refused by the system, and listens on the same port again when `on` is false.
   */
  refuseConnections(on: boolean, how?: 'close' | 'unlisten'): Promise<void>;
  /** Lines of one direction in the log. */
  lines(direction: RelayDirection): RelayedLine[];
  /** Resolves with the first line of `direction` after `afterSeq` (default: the latest seen now) that matches. */
  waitForLine(direction: RelayDirection, match: (line: string) => boolean, options?: { afterSeq?: number; timeoutMs?: number }): Promise<RelayedLine>;
  /** Resolves once `condition()` holds, checking it at every relay event (a line, a connection opening or closing). */
  waitFor(condition: () => boolean, what: string, timeoutMs?: number): Promise<void>;
  close(): Promise<void>;
}

interface Pair {
  readonly id: number;
  readonly client: Socket;
  readonly upstream: Socket;
}

/** Starts a relay to `options.upstream`; resolves once it listens. */
export async function startFaultRelay(options: FaultRelayOptions): Promise<FaultRelay> {
  const maxLogLines = options.maxLogLines ?? 100_000;
  const maxLineChars = options.maxLineChars ?? 65_536;
  const maxQueuedLines = options.maxQueuedLines ?? 10_000;
  const hooks: Record<RelayDirection, DirectionHooks> = {
    toUpstream: { transform: undefined, delayMs: 0 },
    toClient: { transform: undefined, delayMs: 0 },
  };
  const log: RelayedLine[] = [];
  const pairs = new Set<Pair>();
  /** Pending waits: each check runs at every event; each cancel ends its wait when the relay closes. */
  const listeners = new Map<() => void, () => void>();
  const sockets = new Set<Socket>();
  let seen = 0;
  let connections = 0;
  let refused = 0;
  let refusing: false | 'close' | 'unlisten' = false;
  let closed = false;

  const notify = (): void => {
    for (const check of [...listeners.keys()]) check();
  };

  const record = (entry: RelayedLine): void => {
    log.push(entry);
    // Trim in batches so that a long run costs amortised O(1) a line.
    if (log.length > maxLogLines + Math.max(1, maxLogLines >> 3)) log.splice(0, log.length - maxLogLines);
  };

  /** Carries one direction of a pair: splits lines, applies the hooks, keeps order under delays. */
  const pipeDirection = (pair: Pair, direction: RelayDirection, from: Socket, to: Socket): void => {
    let pending = '';
    const queue: Array<{ dueMs: number; text: string }> = [];
    let timer: NodeJS.Timeout | undefined;
    let ended = false;
    let heldBack = false;

    const send = (text: string): void => {
      if (text !== '' && to.writable) to.write(text, 'latin1');
    };
    const endIfDone = (): void => {
      if (ended && queue.length === 0 && to.writable) to.end();
    };
    const flush = (): void => {
      timer = undefined;
      const now = performance.now();
      while (queue.length > 0 && (queue[0] as { dueMs: number }).dueMs <= now) send((queue.shift() as { text: string }).text);
      if (queue.length > 0) timer = setTimeout(flush, Math.max(0, (queue[0] as { dueMs: number }).dueMs - now));
      if (heldBack && queue.length < maxQueuedLines) {
        heldBack = false;
        from.resume();
      }
      endIfDone();
    };

    const pass = (line: string, partial: boolean): void => {
      const hook = hooks[direction];
      const out = partial || hook.transform === undefined ? line : hook.transform(line);
      const sent = out === null ? [] : typeof out === 'string' ? [out] : [...out];
      record({ seq: ++seen, direction, connection: pair.id, atMs: Date.now(), line, sent, partial });
      const text = partial ? line : sent.map((l) => `${l}\n`).join('');
      if (hook.delayMs <= 0 && queue.length === 0) send(text);
      else {
        // Never before an earlier line, whatever the delay was then.
        const last = queue.at(-1)?.dueMs ?? 0;
        queue.push({ dueMs: Math.max(performance.now() + hook.delayMs, last), text });
        timer ??= setTimeout(flush, Math.max(0, hook.delayMs));
        if (queue.length >= maxQueuedLines && !heldBack) {
          heldBack = true;
          from.pause();
        }
      }
      notify();
    };

    from.on('data', (chunk: Buffer) => {
      pending += chunk.toString('latin1');
      let nl: number;
      while ((nl = pending.indexOf('\n')) >= 0) {
        const line = pending.slice(0, nl);
        pending = pending.slice(nl + 1);
        pass(line, false);
      }
      while (pending.length > maxLineChars) {
        pass(pending.slice(0, maxLineChars), true);
        pending = pending.slice(maxLineChars);
      }
    });
    // A half-close is passed on once the lines before it have been sent.
    from.on('end', () => {
      if (pending !== '') pass(pending, true);
      pending = '';
      ended = true;
      endIfDone();
    });
    to.once('close', () => {
      if (timer !== undefined) clearTimeout(timer);
      timer = undefined;
      queue.length = 0;
    });
  };

  const drop = (pair: Pair, how: 'close' | 'reset' = 'close'): void => {
    if (how === 'reset') {
      pair.client.resetAndDestroy();
      pair.upstream.resetAndDestroy();
      return;
    }
    pair.client.destroy();
    pair.upstream.destroy();
  };

  const onClient = (client: Socket): void => {
    sockets.add(client);
    client.on('error', () => undefined);
    client.once('close', () => sockets.delete(client));
    if (closed || refusing) {
      refused++;
      client.destroy();
      notify();
      return;
    }
    client.pause(); // until the upstream side is connected
    const upstream = connect({ host: options.upstream.host ?? '127.0.0.1', port: options.upstream.port, allowHalfOpen: true });
    sockets.add(upstream);
    upstream.on('error', () => undefined);
    upstream.once('close', () => sockets.delete(upstream));
    const pair: Pair = { id: ++connections, client, upstream };
    pairs.add(pair);
    upstream.once('connect', () => {
      upstream.setNoDelay(true);
      client.resume();
      notify();
    });
    client.setNoDelay(true);
    pipeDirection(pair, 'toUpstream', client, upstream);
    pipeDirection(pair, 'toClient', upstream, client);
    // A reset (or a refused upstream) takes the other side with it; an orderly end was passed on.
    let closedSides = 0;
    const onClose = (other: Socket) => (hadError: boolean) => {
      if (hadError) other.destroy();
      if (++closedSides === 2) pairs.delete(pair);
      notify();
    };
    client.once('close', onClose(upstream));
    upstream.once('close', onClose(client));
    notify();
  };

  let server = createServer({ allowHalfOpen: true }, onClient);
  const listen = (onPort: number): Promise<void> =>
    new Promise<void>((resolve, reject) => {
      server.once('error', reject);
      server.listen(onPort, '127.0.0.1', () => {
        server.off('error', reject);
        resolve();
      });
    });
  await listen(0);
  const port = (server.address() as AddressInfo).port;

  const waitFor = (condition: () => boolean, what: string, timeoutMs = 10_000): Promise<void> =>
    new Promise<void>((resolve, reject) => {
      if (condition()) {
        resolve();
        return;
      }
      const finish = (error?: Error): void => {
        listeners.delete(check);
        clearTimeout(timeout);
        if (error) reject(error);
        else resolve();
      };
      const check = (): void => {
        if (condition()) finish();
      };
      const timeout = setTimeout(() => finish(new Error(`fault relay: timed out after ${timeoutMs} ms waiting for ${what}`)), timeoutMs);
      listeners.set(check, () => finish(new Error(`fault relay: closed while waiting for ${what}`)));
    });

  return {
    port,
    toUpstream: hooks.toUpstream,
    toClient: hooks.toClient,
    log,
    get seen() {
      return seen;
    },
    get connections() {
      return connections;
    },
    get openConnections() {
      return pairs.size;
    },
    get refused() {
      return refused;
    },
    dropConnection: (how = 'close') => {
      for (const pair of [...pairs]) drop(pair, how);
    },
    refuseConnections: async (on, how = 'close') => {
      if (closed) return;
      if (on) {
        if (refusing === 'unlisten') return;
        refusing = how;
        // Closing stops the listening socket at once; the relayed connections stay.
        if (how === 'unlisten') server.close();
        return;
      }
      const wasUnlistened = refusing === 'unlisten';
      refusing = false;
      if (wasUnlistened) {
        server = createServer({ allowHalfOpen: true }, onClient);
        await listen(port);
      }
    },
    lines: (direction) => log.filter((entry) => entry.direction === direction),
    waitForLine: async (direction, match, waitOptions = {}) => {
      const afterSeq = waitOptions.afterSeq ?? seen;
      const find = (): RelayedLine | undefined => log.find((e) => e.seq > afterSeq && e.direction === direction && match(e.line));
      await waitFor(() => find() !== undefined, `a matching line ${direction}`, waitOptions.timeoutMs);
      return find() as RelayedLine;
    },
    waitFor,
    close: async () => {
      if (closed) return;
      closed = true;
      for (const socket of sockets) socket.destroy();
      pairs.clear();
      for (const cancel of [...listeners.values()]) cancel();
      if (server.listening) await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}
