/**
 * Transports: bytes in and out of an instrument, and nothing else (no framing, no decoding).
 *
 * The contract, which every implementation keeps:
 * - a transport is one connection: `open()` once; to reconnect, make a new one (the line link
 *   takes a factory for this);
 * - `open()` resolves when bytes can flow, or rejects with the reason (and then emits nothing);
 * - after a successful open, `data` carries the bytes as they come, `error` may report a problem,
 *   and `close` fires exactly once when the connection ends, whoever ended it, with the error
 *   that ended it if there was one;
 * - `write()` resolves when the bytes were handed to the operating system and rejects when the
 *   transport is not open: nothing is queued for later (a shutter command sent late is worse than
 *   one not sent);
 * - `close()` resolves once the connection is closed; it is safe to call at any time, twice, or
 *   while `open()` is pending.
 */
import { createConnection, type Socket } from 'node:net';
import { SerialPort } from 'serialport';
import { z } from 'zod';
import { ConfigError, validate } from '../src/config/validation.ts';

export interface TransportEvents {
  data: [chunk: Uint8Array];
  close: [error: Error | undefined];
  error: [error: Error];
}

export interface Transport {
  /** For status messages: `serial /dev/ttyUSB0 at 9600 Bd`, `tcp 127.0.0.1:7301`. */
  readonly description: string;
  open(): Promise<void>;
  write(data: string | Uint8Array): Promise<void>;
  close(): Promise<void>;
  /** Adds a listener; returns the function that removes it. */
  on<E extends keyof TransportEvents>(event: E, listener: (...args: TransportEvents[E]) => void): () => void;
}

/** Makes a fresh transport for each connection attempt. */
export type TransportFactory = () => Transport;

type Listener<E extends keyof TransportEvents> = (...args: TransportEvents[E]) => void;

function createEmitter() {
  const listeners: { [E in keyof TransportEvents]: Set<Listener<E>> } = { data: new Set(), close: new Set(), error: new Set() };
  return {
    on: <E extends keyof TransportEvents>(event: E, listener: Listener<E>): (() => void) => {
      const set = listeners[event] as Set<Listener<E>>;
      set.add(listener);
      return () => void set.delete(listener);
    },
    emit: <E extends keyof TransportEvents>(event: E, ...args: TransportEvents[E]): void => {
      for (const listener of [...(listeners[event] as Set<Listener<E>>)]) listener(...args);
    },
  };
}

function notOpen(description: string): Error {
  return new Error(`${description} is not open`);
}

// ---------------------------------------------------------------------------------------------
// Serial

/** Serial line settings; what a chamber file says about a port. */
export const SerialSettingsSchema = z.strictObject({
  /** Device path: `/dev/ttyUSB0`, `COM3`, or a pseudo-terminal such as `/tmp/fringe-sim`. */
  path: z.string().min(1),
  /** Default 9600. */
  baudRate: z.number().int().positive().default(9600),
  /** Default 8. */
  dataBits: z.union([z.literal(5), z.literal(6), z.literal(7), z.literal(8)]).default(8),
  /** Default 1. */
  stopBits: z.union([z.literal(1), z.literal(1.5), z.literal(2)]).default(1),
  /** Default `none`. */
  parity: z.enum(['none', 'even', 'odd', 'mark', 'space']).default('none'),
  /** Hardware flow control (RTS/CTS). Default false. */
  rtscts: z.boolean().default(false),
  /** Software flow control. Default false. */
  xon: z.boolean().default(false),
  xoff: z.boolean().default(false),
  /** Open the port exclusively. Default true. */
  lock: z.boolean().default(true),
});
export type SerialSettings = z.input<typeof SerialSettingsSchema>;

/**
 * A serialport binding: `@serialport/bindings-cpp` (the default, real ports) or, in tests,
 * `MockBinding` from `@serialport/binding-mock`.
 */
export interface SerialBinding {
  list(): Promise<unknown[]>;
  open(options: { path: string; baudRate: number }): Promise<unknown>;
}

export type SerialTransportOptions = SerialSettings & {
  /** Default: the platform's real binding. */
  binding?: SerialBinding;
};

/** A serial port through `serialport`; bad settings throw a `ConfigError` naming them. */
export function createSerialTransport(options: SerialTransportOptions): Transport {
  const { binding, ...rest } = options;
  const settings = validate(SerialSettingsSchema, rest, 'createSerialTransport options');
  if (binding !== undefined && (binding === null || typeof binding !== 'object' || typeof binding.open !== 'function')) {
    throw new ConfigError('createSerialTransport options', [{ at: 'binding', message: 'expected a serialport binding (an object with open and list)' }]);
  }
  const description = `serial ${settings.path} at ${settings.baudRate} Bd`;
  const events = createEmitter();
  let port: SerialPort | undefined;
  let state: 'new' | 'opening' | 'open' | 'closed' = 'new';
  let opening: Promise<void> | undefined;

  function ended(error: Error | undefined): void {
    if (state !== 'open') return;
    state = 'closed';
    events.emit('close', error);
  }

  return {
    description,
    on: events.on,
    open() {
      if (state !== 'new') return Promise.reject(new Error(`${description}: a transport opens once; make a new one to reconnect`));
      state = 'opening';
      opening = new Promise<void>((resolve, reject) => {
        // `serialport` types leave `binding` out of its options, but honours it when given.
        const p = new SerialPort({ ...settings, autoOpen: false, ...(binding ? { binding } : {}) });
        port = p;
        p.on('data', (chunk: Buffer) => events.emit('data', chunk));
        p.on('error', (error: Error) => {
          if (state === 'open') events.emit('error', error);
        });
        p.on('close', (error: Error | null) => ended(error ?? undefined));
        p.open((error) => {
          if (error) {
            state = 'closed';
            reject(error);
          } else {
            state = 'open';
            resolve();
          }
        });
      });
      return opening;
    },
    write(data) {
      const p = port;
      if (state !== 'open' || p === undefined || !p.isOpen) return Promise.reject(notOpen(description));
      return new Promise<void>((resolve, reject) => {
        p.write(typeof data === 'string' ? data : Buffer.from(data.buffer, data.byteOffset, data.byteLength), (error) => (error ? reject(error) : resolve()));
      });
    },
    async close() {
      await opening?.catch(() => undefined);
      const p = port;
      if (state !== 'open' || p === undefined) {
        state = 'closed';
        return;
      }
      await new Promise<void>((resolve) => {
        p.close(() => resolve());
      });
      ended(undefined);
    },
  };
}

// ---------------------------------------------------------------------------------------------
// TCP

/** A TCP client connection; what a chamber file says about a socket. */
export const TcpSettingsSchema = z.strictObject({
  host: z.string().min(1),
  port: z.number().int().min(1).max(65535),
  /** Give up a connection attempt after this long. Default 5000 ms. */
  connectTimeoutMs: z.number().int().positive().default(5000),
  /** TCP keep-alive probe delay, so a dead peer is noticed; 0 turns it off. Default 5000 ms. */
  keepAliveMs: z.number().int().nonnegative().default(5000),
});
export type TcpTransportOptions = z.input<typeof TcpSettingsSchema>;

/** A TCP client through `node:net`; bad settings throw a `ConfigError` naming them. */
export function createTcpTransport(options: TcpTransportOptions): Transport {
  const settings = validate(TcpSettingsSchema, options, 'createTcpTransport options');
  const description = `tcp ${settings.host}:${settings.port}`;
  const events = createEmitter();
  let socket: Socket | undefined;
  let state: 'new' | 'opening' | 'open' | 'closed' = 'new';
  let opening: Promise<void> | undefined;
  let closed: Promise<void> | undefined;

  return {
    description,
    on: events.on,
    open() {
      if (state !== 'new') return Promise.reject(new Error(`${description}: a transport opens once; make a new one to reconnect`));
      state = 'opening';
      opening = new Promise<void>((resolve, reject) => {
        const s = createConnection({ host: settings.host, port: settings.port });
        socket = s;
        let lastError: Error | undefined;
        const timer = setTimeout(() => s.destroy(new Error(`no connection within ${settings.connectTimeoutMs} ms`)), settings.connectTimeoutMs);
        closed = new Promise<void>((resolveClosed) => {
          s.once('close', () => {
            clearTimeout(timer);
            resolveClosed();
            if (state === 'opening') {
              state = 'closed';
              reject(lastError ?? new Error(`${description} closed before it opened`));
            } else if (state === 'open') {
              state = 'closed';
              events.emit('close', lastError);
            }
          });
        });
        s.once('connect', () => {
          clearTimeout(timer);
          state = 'open';
          // Commands are a line each: send them now, not when Nagle's algorithm is ready.
          s.setNoDelay(true);
          if (settings.keepAliveMs > 0) s.setKeepAlive(true, settings.keepAliveMs);
          resolve();
        });
        s.on('data', (chunk: Buffer) => events.emit('data', chunk));
        s.on('error', (error) => {
          lastError = error;
          if (state === 'open') events.emit('error', error);
        });
      });
      return opening;
    },
    write(data) {
      const s = socket;
      if (state !== 'open' || s === undefined || !s.writable) return Promise.reject(notOpen(description));
      return new Promise<void>((resolve, reject) => {
        s.write(data, (error) => (error ? reject(error) : resolve()));
      });
    },
    async close() {
      await opening?.catch(() => undefined);
      const s = socket;
      if (state !== 'open' || s === undefined) {
        if (state === 'new') state = 'closed';
        await closed;
        return;
      }
      // End politely (pending bytes go out), but do not wait for a peer that never answers.
      s.end();
      const force = setTimeout(() => s.destroy(), 1000);
      await closed;
      clearTimeout(force);
    },
  };
}
