/**
 * The live feed over WebSockets (`ws`, attached to Fastify's own HTTP server through its
 * `upgrade` event):
 *   /api/live                       the run on show
 *   /api/runs/:id/replay?speed=60   a recorded run replayed through the controller for this client
 *
 * Protocol (server to client only, JSON text frames):
 *   {type:'snapshot', reason:'connect'|'update'|'resync', snapshot}   first, then after layer changes
 *   {type:'event', seq, event}                                       every event, unthinned, in order
 *   {type:'optical', layer, points:[[t, signal, chipNm]…]}             decimated readings, batched
 *   {type:'crystal', points:[[t, rate, lo, hi]…], partNm, frequencyHz, lifeUsed}
 *   {type:'status', status}                                          on every change of the status line
 * Browsers may connect only from this server's own pages (the Origin must name this host).
 * A client whose socket holds more than `maxBufferedBytes` unsent is not buffered without
 * bound: it is skipped until it has drained, then sent a fresh snapshot (the latest state).
 */
import { existsSync } from 'node:fs';
import { STATUS_CODES, type IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import type { FastifyInstance } from 'fastify';
import { WebSocket, WebSocketServer } from 'ws';
import { mayView } from '../auth.ts';
import { startJournalReplay } from '../journal-run.ts';
import type { RunHub } from '../run-hub.ts';
import { runFolder } from '../run-store.ts';
import type { HubMessage } from '../views.ts';

export interface LiveOptions {
  /** Unsent bytes in a client's socket above which it is dropped to the latest state (default 1 MiB). */
  maxBufferedBytes: number;
  /** Wall-clock period of batching points and refreshing the status line, ms (default 100). */
  flushMs: number;
  /** Clients at once, replays included (default 32). */
  maxClients: number;
  /** Replays at once (default 4). */
  maxReplays: number;
  /** Ping period; a client that misses a pong is closed, ms (default 15000). */
  pingMs: number;
}

export const DEFAULT_LIVE_OPTIONS: LiveOptions = { maxBufferedBytes: 1 << 20, flushMs: 100, maxClients: 32, maxReplays: 4, pingMs: 15000 };

/** Counters for health and tests. */
export interface LiveStats {
  clients: number;
  replays: number;
  /** Times a slow client was dropped to the latest state. */
  dropped: number;
  /** Fresh snapshots sent to clients that had fallen behind. */
  resyncs: number;
}

/** Speeds a replay may ask for (× real time). */
const SPEED_RANGE = [0.1, 100000] as const;

export function livePlugin(app: FastifyInstance, options: Partial<LiveOptions>, done: (error?: Error) => void): void {
  const opts: LiveOptions = { ...DEFAULT_LIVE_OPTIONS, ...pick(options) };
  const stats = app.fringe.liveStats;
  const wss = new WebSocketServer({ noServer: true, maxPayload: 1024, perMessageDeflate: false });
  const sockets = new Set<WebSocket>();
  const livePath = `${app.prefix}/live`;
  const replayPath = new RegExp(`^${app.prefix}/runs/([^/]+)/replay$`);

  const onUpgrade = (request: IncomingMessage, socket: Duplex, head: Buffer): void => {
    const url = new URL(request.url ?? '/', 'http://localhost');
    const replay = replayPath.exec(url.pathname);
    if (url.pathname !== livePath && !replay) return reject(socket, 404, 'no feed at this address');
    // A page from another site must not read the feed through the operator's browser.
    if (!sameOrigin(request.headers.origin, request.headers.host)) return reject(socket, 403, 'feeds are for pages of this server only');
    if (!mayView(app.fringe, request.headers, url.searchParams)) return reject(socket, 401, 'viewing this server needs its viewer token (?viewer=)');
    if (sockets.size >= opts.maxClients) return reject(socket, 503, 'too many viewers; try again later');
    if (!replay) {
      wss.handleUpgrade(request, socket, head, (ws) => serve(ws, app.fringe.hub));
      return;
    }
    const folder = runFolder(app.fringe.runsDir, decodeURIComponent(replay[1] as string));
    if (!folder) return reject(socket, 404, 'no such run');
    if (!existsSync(folder.recipeFile)) return reject(socket, 409, 'this run has no recipe.json; it cannot be replayed');
    const speedText = url.searchParams.get('speed') ?? '60';
    const speed = Number(speedText);
    if (!(speed >= SPEED_RANGE[0] && speed <= SPEED_RANGE[1])) return reject(socket, 400, `speed must be a number from ${SPEED_RANGE[0]} to ${SPEED_RANGE[1]}`);
    if (stats.replays >= opts.maxReplays) return reject(socket, 503, 'too many replays at once; try again later');
    wss.handleUpgrade(request, socket, head, (ws) => {
      const abort = new AbortController();
      let replayed;
      try {
        replayed = startJournalReplay(folder, speed, abort.signal);
      } catch (error) {
        ws.close(1011, `cannot replay: ${(error as Error).message}`.slice(0, 120));
        return;
      }
      stats.replays++;
      replayed.done.catch(() => ws.close(1011, 'the replay failed'));
      serve(ws, replayed.hub, () => {
        stats.replays--;
        abort.abort();
      });
    });
  };

  function serve(ws: WebSocket, hub: RunHub, onEnd?: () => void): void {
    sockets.add(ws);
    stats.clients = sockets.size;
    let behind = false;
    let lastStatus = '';
    let opticalLayer: number | null = null;
    let optical: (readonly [number, number, number])[] = [];
    let crystal: (readonly [number, number, number, number])[] = [];
    let crystalFigures: { partNm: number | null; frequencyHz: number | null; lifeUsed: number | null } = { partNm: null, frequencyHz: null, lifeUsed: null };
    let alive = true;

    const send = (text: string): void => {
      if (behind || ws.readyState !== WebSocket.OPEN) return;
      if (ws.bufferedAmount > opts.maxBufferedBytes) {
        behind = true;
        stats.dropped++;
        optical = [];
        crystal = [];
        return;
      }
      ws.send(text);
    };
    const flushPoints = (): void => {
      if (optical.length > 0) send(JSON.stringify({ type: 'optical', layer: opticalLayer, points: optical }));
      if (crystal.length > 0) send(JSON.stringify({ type: 'crystal', points: crystal, ...crystalFigures }));
      optical = [];
      crystal = [];
    };
    const sendSnapshot = (reason: 'connect' | 'update' | 'resync'): void => {
      const snapshot = hub.snapshot();
      lastStatus = JSON.stringify(snapshot.status);
      send(JSON.stringify({ type: 'snapshot', reason, snapshot }));
    };

    const unsubscribe = hub.subscribe((m: HubMessage) => {
      if (behind) return;
      switch (m.type) {
        case 'optical':
          if (opticalLayer !== m.layer) {
            flushPoints();
            opticalLayer = m.layer;
          }
          optical.push(m.point);
          if (optical.length >= 512) flushPoints();
          return;
        case 'crystal':
          crystal.push(m.point);
          crystalFigures = { partNm: m.partNm, frequencyHz: m.frequencyHz, lifeUsed: m.lifeUsed };
          if (crystal.length >= 512) flushPoints();
          return;
        case 'status':
          flushPoints();
          lastStatus = JSON.stringify(m.status);
          send(`{"type":"status","status":${lastStatus}}`);
          return;
        case 'snapshot':
          flushPoints();
          lastStatus = JSON.stringify(m.snapshot.status);
          send(JSON.stringify({ type: 'snapshot', reason: 'update', snapshot: m.snapshot }));
          return;
        case 'event':
          flushPoints();
          send(JSON.stringify(m));
          return;
      }
    });

    const flushTimer = setInterval(() => {
      if (behind) {
        if (ws.readyState === WebSocket.OPEN && ws.bufferedAmount <= opts.maxBufferedBytes / 4) {
          behind = false;
          stats.resyncs++;
          sendSnapshot('resync');
        }
        return;
      }
      flushPoints();
      const status = JSON.stringify(hub.status());
      if (status !== lastStatus) {
        lastStatus = status;
        send(`{"type":"status","status":${status}}`);
      }
    }, opts.flushMs);
    const pingTimer = setInterval(() => {
      if (!alive) {
        ws.terminate();
        return;
      }
      alive = false;
      ws.ping();
    }, opts.pingMs);
    flushTimer.unref();
    pingTimer.unref();

    let ended = false;
    const end = (): void => {
      if (ended) return;
      ended = true;
      clearInterval(flushTimer);
      clearInterval(pingTimer);
      unsubscribe();
      sockets.delete(ws);
      stats.clients = sockets.size;
      onEnd?.();
    };
    ws.on('pong', () => {
      alive = true;
    });
    // The feed is one-way; anything a client sends is ignored.
    ws.on('message', () => undefined);
    ws.on('close', end);
    ws.on('error', end);
    sendSnapshot('connect');
  }

  app.server.on('upgrade', onUpgrade);
  app.addHook('onClose', (_instance, next) => {
    app.server.off('upgrade', onUpgrade);
    for (const ws of sockets) ws.terminate();
    wss.close(() => next());
  });
  done();
}

/** True without an Origin (not a browser), or when the Origin names this very host. */
function sameOrigin(origin: string | undefined, host: string | undefined): boolean {
  if (origin === undefined) return true;
  try {
    return new URL(origin).host === host;
  } catch {
    return false;
  }
}

function reject(socket: Duplex, code: number, message: string): void {
  const body = `${message}\n`;
  socket.end(
    `HTTP/1.1 ${code} ${STATUS_CODES[code] ?? ''}\r\nConnection: close\r\nContent-Type: text/plain; charset=utf-8\r\nContent-Length: ${Buffer.byteLength(body)}\r\n\r\n${body}`,
  );
}

/** Only the option fields (Fastify mixes `prefix` and friends into a plugin's options). */
function pick(options: Partial<LiveOptions>): Partial<LiveOptions> {
  const out: Partial<LiveOptions> = {};
  for (const key of Object.keys(DEFAULT_LIVE_OPTIONS) as (keyof LiveOptions)[]) {
    const value = options[key];
    if (typeof value === 'number' && value > 0) out[key] = value;
  }
  return out;
}
