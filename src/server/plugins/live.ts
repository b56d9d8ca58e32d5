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
 * The Host must name this server (as for every route), and browsers may connect only from its
 * own pages (the Origin must name this host). A client whose socket holds more than
 * `maxBufferedBytes` unsent is not buffered without bound: it is skipped until it has drained,
 * then sent a fresh snapshot (the latest state). At `maxClients`, a newcomer who passed every
 * check takes the place of the viewer that has owed a pong the longest.
 */
import { existsSync } from 'node:fs';
import { STATUS_CODES, type IncomingMessage } from 'node:http';
import type { Duplex } from 'node:stream';
import type { FastifyInstance } from 'fastify';
import { WebSocket, WebSocketServer } from 'ws';
import { mayView } from '../auth.ts';
import { decodeComponent, splitTarget } from '../host-rule.ts';
import { startJournalReplay } from '../journal-run.ts';
import type { RunHub } from '../run-hub.ts';
import { runFolder } from '../run-store.ts';
import type { HubMessage } from '../views.ts';

export interface LiveOptions {
  /** Unsent bytes in a client's socket above which it is dropped to the latest state (default 1 MiB). */
  maxBufferedBytes: number;
  /** Wall-clock period of batching points and refreshing the status line, ms (default 100). */
  flushMs: number;
  /** Clients at once, replays included (default 32); at the limit a viewer that has stopped reading makes room for a new one. */
  maxClients: number;
  /** Replays at once (default 4). */
  maxReplays: number;
  /** Ping period; a client that has not answered the last ping by the next is closed, ms (default 15000). */
  pingMs: number;
}

export const DEFAULT_LIVE_OPTIONS: LiveOptions = { maxBufferedBytes: 1 << 20, flushMs: 100, maxClients: 32, maxReplays: 4, pingMs: 15000 };

/** A connected viewer, as the door sees it. */
interface Viewer {
  /** Order number of the ping it has not answered yet, or null. */
  owesPongSince: number | null;
  /** Closes it now to make room. */
  evict(): void;
}

/** Counters for health and tests. */
export interface LiveStats {
  clients: number;
  replays: number;
  /** Times a slow client was dropped to the latest state. */
  dropped: number;
  /** Fresh snapshots sent to clients that had fallen behind. */
  resyncs: number;
  /** Viewers closed to let a new one in, the client limit being reached. */
  evicted: number;
}

/** Speeds a replay may ask for (× real time). */
const SPEED_RANGE = [0.1, 100000] as const;

export function livePlugin(app: FastifyInstance, options: Partial<LiveOptions>, done: (error?: Error) => void): void {
  const opts: LiveOptions = { ...DEFAULT_LIVE_OPTIONS, ...pick(options) };
  const stats = app.fringe.liveStats;
  const wss = new WebSocketServer({ noServer: true, maxPayload: 1024, perMessageDeflate: false });
  const viewers = new Map<WebSocket, Viewer>();
  /** Orders pings: a smaller number owed is a pong owed for longer. */
  let pingsSent = 0;
  const livePath = `${app.prefix}/live`;
  const replayPath = new RegExp(`^${app.prefix}/runs/([^/]+)/replay$`);

  const onUpgrade = (request: IncomingMessage, socket: Duplex, head: Buffer): void => {
    // The socket is ours from here: a client that resets it must not raise an unhandled 'error'.
    socket.on('error', () => socket.destroy());
    try {
      admit(request, socket, head);
    } catch (error) {
      // Nothing a request carries may end the process; this is the last line of defence.
      app.log.error({ err: error }, 'live feed: upgrade failed');
      reject(socket, 400, 'this request could not be read');
    }
  };

  function admit(request: IncomingMessage, socket: Duplex, head: Buffer): void {
    const target = splitTarget(request.url ?? '/');
    const { hostRule } = app.fringe;
    const connection = request.socket;
    if (!hostRule.allows(target.authority ?? request.headers.host, connection)) return reject(socket, 421, hostRule.refusal(connection));
    const replay = replayPath.exec(target.path);
    if (target.path !== livePath && !replay) return reject(socket, 404, 'no feed at this address');
    // A page from another site must not read the feed through the operator's browser.
    if (!sameOrigin(request.headers.origin, request.headers.host)) return reject(socket, 403, 'feeds are for pages of this server only');
    const query = new URLSearchParams(target.query);
    if (!mayView(app.fringe, request.headers, query)) return reject(socket, 401, 'viewing this server needs its viewer token (?viewer=)');
    if (!replay) {
      if (!makeRoom()) return reject(socket, 503, 'too many viewers; try again later');
      wss.handleUpgrade(request, socket, head, (ws) => serve(ws, app.fringe.hub));
      return;
    }
    const id = decodeComponent(replay[1] as string);
    const folder = id === null ? null : runFolder(app.fringe.runsDir, id);
    if (!folder) return reject(socket, 404, 'no such run');
    if (!existsSync(folder.recipeFile)) return reject(socket, 409, 'this run has no recipe.json; it cannot be replayed');
    const speedText = query.get('speed') ?? '60';
    const speed = Number(speedText);
    if (!(speed >= SPEED_RANGE[0] && speed <= SPEED_RANGE[1])) return reject(socket, 400, `speed must be a number from ${SPEED_RANGE[0]} to ${SPEED_RANGE[1]}`);
    if (stats.replays >= opts.maxReplays) return reject(socket, 503, 'too many replays at once; try again later');
    if (!makeRoom()) return reject(socket, 503, 'too many viewers; try again later');
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
  }

  /**
   * Room for one more viewer. At the limit, the viewer that has owed a pong the longest goes: one
   * that has stopped reading its socket never answers the ping sent when it connected, so stalled
   * viewers cannot lock out a new one (or the operator). False when every viewer is answering.
   */
  function makeRoom(): boolean {
    if (viewers.size < opts.maxClients) return true;
    let stalest: Viewer | undefined;
    for (const viewer of viewers.values()) {
      if (viewer.owesPongSince !== null && (stalest?.owesPongSince ?? Infinity) > viewer.owesPongSince) stalest = viewer;
    }
    if (!stalest) return false;
    stalest.evict();
    stats.evicted++;
    return true;
  }

  function serve(ws: WebSocket, hub: RunHub, onEnd?: () => void): void {
    const viewer: Viewer = {
      owesPongSince: null,
      evict: () => {
        ws.terminate();
        end();
      },
    };
    viewers.set(ws, viewer);
    stats.clients = viewers.size;
    let behind = false;
    let lastStatus = '';
    let opticalLayer: number | null = null;
    let optical: (readonly [number, number, number])[] = [];
    let crystal: (readonly [number, number, number, number])[] = [];
    let crystalFigures: { partNm: number | null; frequencyHz: number | null; lifeUsed: number | null } = { partNm: null, frequencyHz: null, lifeUsed: null };

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
    const ping = (): void => {
      viewer.owesPongSince = ++pingsSent;
      ws.ping();
    };
    const pingTimer = setInterval(() => {
      if (viewer.owesPongSince !== null) {
        ws.terminate();
        return;
      }
      ping();
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
      viewers.delete(ws);
      stats.clients = viewers.size;
      onEnd?.();
    };
    ws.on('pong', () => {
      viewer.owesPongSince = null;
    });
    // The feed is one-way; anything a client sends is ignored.
    ws.on('message', () => undefined);
    ws.on('close', end);
    ws.on('error', end);
    sendSnapshot('connect');
    // Pinged at once, so that a viewer that never reads is known as one before the next period.
    ping();
  }

  app.server.on('upgrade', onUpgrade);
  app.addHook('onClose', (_instance, next) => {
    app.server.off('upgrade', onUpgrade);
    for (const ws of viewers.keys()) ws.terminate();
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
