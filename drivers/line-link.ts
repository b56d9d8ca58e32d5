/**
 * A line link: a transport kept connected, its bytes framed into lines, and its health reported.
 * The reading source decodes its lines; the shutter output writes commands to it and reads
 * acknowledgements from it, so one instrument port can carry both.
 *
 * What must stay true:
 * - nothing here blocks or throws into a stream: a lost connection is a status, retried with
 *   exponential back-off for as long as the link is open; `lines` never errors;
 * - writes while the link is down fail at once (nothing is queued to be sent late);
 * - `close()` ends with `lost { closedByUs: true }` and completes `lines` and `status`.
 */
import { BehaviorSubject, Subject, type Observable } from 'rxjs';
import { z } from 'zod';
import { ConfigError, validate } from '../src/config/validation.ts';
import type { Fault, SourceStatus } from '../src/pipeline/types.ts';
import { createLineFramer, LineFramerOptionsSchema, type LineFramer } from './line-framer.ts';
import type { Transport, TransportFactory } from './transport.ts';

/** Reconnection back-off: the n-th retry in a row waits `min(maxDelayMs, initialDelayMs · factor^n)`. */
export const RetryOptionsSchema = z
  .strictObject({
    /** Wait before the first retry. Default 250 ms. */
    initialDelayMs: z.number().int().nonnegative().default(250),
    /** Longest wait between retries. Default 10 000 ms. */
    maxDelayMs: z.number().int().positive().default(10_000),
    /** Growth of the wait from one failed attempt to the next (1 = constant). Default 2. */
    factor: z.number().finite().min(1).max(10).default(2),
  })
  .refine((r) => r.maxDelayMs >= r.initialDelayMs, { path: ['maxDelayMs'], message: 'must be at least initialDelayMs' });
export type RetryOptions = z.input<typeof RetryOptionsSchema>;
export type ResolvedRetryOptions = z.output<typeof RetryOptionsSchema>;

/** The wait before retry number `failures` (0 for the first retry after a loss), ms. */
export function retryDelayMs(failures: number, retry: ResolvedRetryOptions): number {
  return Math.round(Math.min(retry.maxDelayMs, retry.initialDelayMs * retry.factor ** failures));
}

/** The options a chamber file can state for a link (the transport and the clock are code). */
export const LineLinkSettingsSchema = z.strictObject({
  framer: LineFramerOptionsSchema.prefault({}),
  retry: RetryOptionsSchema.prefault({}),
  /** A connected link that delivers no line for this long is reported `stale`. Default 2 s. */
  staleAfterS: z.number().finite().positive().default(2),
});
export type LineLinkSettings = z.input<typeof LineLinkSettingsSchema>;

export type LineLinkOptions = LineLinkSettings & {
  /** Makes a fresh transport for each connection attempt. */
  transport: TransportFactory;
  /** Host monotonic time, s, stamped on every line as its arrival time. Default `performance.now() / 1000`. */
  clock?: () => number;
};

/** A complete line as it arrived. */
export interface LinkLine {
  readonly kind: 'line';
  readonly text: string;
  readonly arrivalS: number;
}

export interface LineLink {
  /** Every line (and every `line-too-long` fault), hot: subscribe before the first line arrives. */
  readonly lines: Observable<LinkLine | Fault>;
  /** The link's health; a new subscriber gets the current state first. */
  readonly status: Observable<SourceStatus>;
  /** Sends text as is (add the terminator); rejects at once when the link is down. */
  write(text: string): Promise<void>;
  /** Stops retrying, closes the transport, reports `lost { closedByUs: true }`, completes the streams. */
  close(): Promise<void>;
  /** The current transport's description (for status lines and logs). */
  readonly description: string;
}

const NAME = 'createLineLink options';

interface Connection {
  readonly transport: Transport;
  readonly framer: LineFramer;
  opened: boolean;
  lastError: Error | undefined;
  detach: () => void;
}

/** Opens a link and starts connecting at once; bad options throw a `ConfigError` naming them. */
export function createLineLink(options: LineLinkOptions): LineLink {
  const { transport: makeTransport, clock = () => performance.now() / 1000, ...rest } = options;
  if (typeof makeTransport !== 'function') throw new ConfigError(NAME, [{ at: 'transport', message: 'expected a function that makes a transport' }]);
  if (typeof clock !== 'function') throw new ConfigError(NAME, [{ at: 'clock', message: 'expected a function returning seconds' }]);
  const o = validate(LineLinkSettingsSchema, rest, NAME);

  const lines = new Subject<LinkLine | Fault>();
  const status = new BehaviorSubject<SourceStatus>({ state: 'connecting' });
  let closed = false;
  let closing: Promise<void> | undefined;
  let current: Connection | undefined;
  /** Failed attempts since the last connection that delivered a line. */
  let failures = 0;
  let retryTimer: ReturnType<typeof setTimeout> | undefined;
  let staleTimer: ReturnType<typeof setTimeout> | undefined;
  let lastLineS = 0;
  let stale = false;
  let description = '';

  function setStatus(next: SourceStatus): void {
    if (!closed) status.next(next);
  }

  function armStale(delayS: number): void {
    clearTimeout(staleTimer);
    staleTimer = setTimeout(checkStale, Math.max(1, delayS * 1000));
  }

  function checkStale(): void {
    staleTimer = undefined;
    if (!current?.opened || stale) return;
    const quietS = clock() - lastLineS;
    if (quietS >= o.staleAfterS) {
      stale = true;
      setStatus({ state: 'stale', detail: `no line for ${quietS.toFixed(1)} s from ${description}` });
    } else {
      armStale(o.staleAfterS - quietS);
    }
  }

  function connect(first: boolean): void {
    retryTimer = undefined;
    if (closed) return;
    let transport: Transport;
    if (first) {
      // A factory that cannot make a transport at all is a configuration error: throw it now.
      transport = makeTransport();
    } else {
      try {
        transport = makeTransport();
      } catch (error) {
        scheduleRetry(`cannot make a transport: ${(error as Error).message}`);
        return;
      }
    }
    description = transport.description;
    setStatus({ state: 'connecting', detail: description });
    const conn: Connection = { transport, framer: createLineFramer(o.framer), opened: false, lastError: undefined, detach: () => undefined };
    const offs = [
      transport.on('data', (chunk) => onData(conn, chunk)),
      transport.on('error', (error) => {
        conn.lastError = error;
      }),
      transport.on('close', (error) => ended(conn, (error ?? conn.lastError)?.message ?? 'closed by the other end')),
    ];
    conn.detach = () => offs.forEach((off) => off());
    current = conn;
    let opening: Promise<void>;
    try {
      opening = transport.open();
    } catch (error) {
      opening = Promise.reject(error instanceof Error ? error : new Error(String(error)));
    }
    opening.then(
      () => {
        if (current !== conn) {
          void transport.close().catch(() => undefined);
          return;
        }
        conn.opened = true;
        lastLineS = clock();
        stale = false;
        setStatus({ state: 'connected', detail: description });
        armStale(o.staleAfterS);
      },
      (error: unknown) => ended(conn, `cannot open: ${error instanceof Error ? error.message : String(error)}`),
    );
  }

  function onData(conn: Connection, chunk: Uint8Array): void {
    if (current !== conn) return;
    const arrivalS = clock();
    const items = conn.framer.push(chunk, arrivalS);
    if (items.length === 0) return;
    lastLineS = arrivalS;
    failures = 0;
    if (stale) {
      stale = false;
      setStatus({ state: 'connected', detail: description });
      armStale(o.staleAfterS);
    }
    for (const item of items) lines.next(typeof item === 'string' ? { kind: 'line', text: item, arrivalS } : item);
  }

  function ended(conn: Connection, reason: string): void {
    if (current !== conn) return;
    current = undefined;
    conn.detach();
    conn.framer.reset();
    clearTimeout(staleTimer);
    void conn.transport.close().catch(() => undefined);
    scheduleRetry(reason);
  }

  function scheduleRetry(reason: string): void {
    if (closed) return;
    const delayMs = retryDelayMs(failures, o.retry);
    failures += 1;
    setStatus({ state: 'lost', closedByUs: false, detail: `${description}: ${reason}; retrying in ${delayMs} ms` });
    retryTimer = setTimeout(() => connect(false), delayMs);
  }

  connect(true);

  return {
    lines: lines.asObservable(),
    status: status.asObservable(),
    get description() {
      return description;
    },
    write(text) {
      const conn = current;
      if (closed || conn === undefined || !conn.opened) return Promise.reject(new Error(`${description} is not connected`));
      return conn.transport.write(text);
    },
    close() {
      if (closing) return closing;
      closed = true;
      clearTimeout(retryTimer);
      clearTimeout(staleTimer);
      const conn = current;
      current = undefined;
      closing = (async () => {
        if (conn) {
          conn.detach();
          await conn.transport.close().catch(() => undefined);
        }
        status.next({ state: 'lost', closedByUs: true, detail: `${description}: closed` });
        status.complete();
        lines.complete();
      })();
      return closing;
    },
  };
}
