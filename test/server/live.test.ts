// The live feed over a real WebSocket on an ephemeral port: the snapshot first, then every event
// and decimated readings; a slow client dropped to the latest state; a recorded run replayed;
// refusals at the door.
import type { IncomingMessage } from 'node:http';
import { connect as connectTcp, type AddressInfo, type Socket } from 'node:net';
import type { FastifyInstance } from 'fastify';
import { afterEach, describe, expect, it } from 'vitest';
import { WebSocket } from 'ws';
import { buildServer, type ServerOptions } from '../../src/server/build-server.ts';
import { startSimulatedRun } from '../../src/server/simulated-run.ts';
import type { RunSnapshot } from '../../src/server/views.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { ar4, edge, manualRun, tempDir, TOKEN, typical, VIEWER_TOKEN, withOpticalRate, type ManualRun } from './support.ts';

type Message =
  | { type: 'snapshot'; reason: string; snapshot: RunSnapshot }
  | { type: 'event'; seq: number; event: RunEvent }
  | { type: 'optical'; layer: number; points: [number, number, number][] }
  | { type: 'crystal'; points: [number, number, number, number][] }
  | { type: 'status'; status: RunSnapshot['status'] };

let apps: FastifyInstance[] = [];
let sockets: WebSocket[] = [];
afterEach(async () => {
  for (const s of sockets) s.terminate();
  sockets = [];
  await Promise.all(apps.map((a) => a.close()));
  apps = [];
});

async function listen(m: Pick<ManualRun, 'hub'>, runsDir: string, options: Partial<ServerOptions> = {}): Promise<string> {
  const app = buildServer({ hub: m.hub, runsDir }, { token: TOKEN, host: '127.0.0.1', live: { flushMs: 20 }, ...options });
  apps.push(app);
  await app.listen({ port: 0, host: '127.0.0.1' });
  return `ws://127.0.0.1:${(app.server.address() as AddressInfo).port}`;
}

interface Client {
  socket: WebSocket;
  messages: Message[];
  /** Resolves when the first ping from the server has arrived (and been answered). */
  pinged: Promise<unknown>;
  /** Resolves when a message satisfying `test` has arrived (or has already). */
  until(test: (m: Message) => boolean, timeoutMs?: number): Promise<Message>;
}

function connect(url: string, hooks: { origin?: string; host?: string; onUpgrade?: (socket: WebSocket, res: IncomingMessage) => void } = {}): Promise<Client> {
  const socket = new WebSocket(url, { ...(hooks.origin === undefined ? {} : { origin: hooks.origin }), ...(hooks.host === undefined ? {} : { headers: { host: hooks.host } }) });
  sockets.push(socket);
  const messages: Message[] = [];
  const waiters: { test: (m: Message) => boolean; resolve: (m: Message) => void }[] = [];
  const pinged = new Promise((resolve) => socket.once('ping', resolve));
  socket.on('upgrade', (res) => hooks.onUpgrade?.(socket, res));
  socket.on('message', (data: Buffer) => {
    const m = JSON.parse(data.toString('utf8')) as Message;
    messages.push(m);
    for (const w of [...waiters]) {
      if (w.test(m)) {
        waiters.splice(waiters.indexOf(w), 1);
        w.resolve(m);
      }
    }
  });
  const client: Client = {
    socket,
    messages,
    pinged,
    until(test, timeoutMs = 5000) {
      const found = messages.find(test);
      if (found) return Promise.resolve(found);
      return new Promise((resolve, reject) => {
        const timer = setTimeout(() => reject(new Error(`no such message within ${timeoutMs} ms (${messages.length} received)`)), timeoutMs);
        waiters.push({
          test,
          resolve: (m) => {
            clearTimeout(timer);
            resolve(m);
          },
        });
      });
    },
  };
  return new Promise((resolve, reject) => {
    socket.once('open', () => resolve(client));
    socket.once('error', reject);
  });
}

/** The HTTP status with which the server refused an upgrade. */
function refusal(url: string, origin?: string, host?: string): Promise<number> {
  return new Promise((resolve, reject) => {
    const socket = new WebSocket(url, { ...(origin === undefined ? {} : { origin }), ...(host === undefined ? {} : { headers: { host } }) });
    socket.on('unexpected-response', (_req, res) => resolve(res.statusCode ?? 0));
    socket.on('open', () => reject(new Error('the upgrade was accepted')));
    socket.on('error', () => undefined);
  });
}

const UPGRADE_HEADERS = 'Connection: Upgrade\r\nUpgrade: websocket\r\nSec-WebSocket-Version: 13\r\nSec-WebSocket-Key: dGhlIHNhbXBsZSBub25jZQ==\r\n';

/** Sends `request` as written over a raw TCP connection; resolves with the status line of the answer. */
function rawStatus(url: string, request: string): Promise<string> {
  const port = Number(new URL(url).port);
  return new Promise((resolve, reject) => {
    const socket = connectTcp(port, '127.0.0.1', () => socket.write(request));
    let answer = '';
    socket.on('data', (chunk: Buffer) => {
      answer += chunk.toString('latin1');
      if (answer.includes('\r\n')) {
        socket.destroy();
        resolve(answer.slice(0, answer.indexOf('\r\n')));
      }
    });
    socket.on('error', reject);
    socket.on('close', () => resolve(answer));
  });
}

const pause = (ms: number): Promise<void> => new Promise((resolve) => setTimeout(resolve, ms));

describe('the live feed', () => {
  it('sends the snapshot first, then every event in order and the readings', async () => {
    const m = manualRun(ar4);
    const url = await listen(m, tempDir('live'));
    const client = await connect(`${url}/api/live`);
    const first = await client.until(() => true);
    expect(first.type).toBe('snapshot');
    if (first.type !== 'snapshot') throw new Error('not a snapshot');
    expect(first.reason).toBe('connect');
    expect(first.snapshot.status.layer).toBe(1);
    const before = m.events.length;

    m.run.runUntil(150); // past the cuts of layers 1 (crystal) and 2 (level), into layer 3
    const layer = m.run.state.index + 1;
    expect(layer).toBe(3);
    // One snapshot after the burst, of the state at its end.
    await client.until((msg) => msg.type === 'snapshot' && msg.reason === 'update' && msg.snapshot.status.layer === layer);
    await pause(60);
    const events = client.messages.filter((msg): msg is Extract<Message, { type: 'event' }> => msg.type === 'event');
    expect(events.map((e) => e.event)).toEqual(JSON.parse(JSON.stringify(m.events.slice(before))));
    expect(events.map((e) => e.event.type)).toContain('cut');
    events.forEach((e, i) => expect(e.seq).toBe((events[0]?.seq ?? 0) + i));
    const optical = client.messages.filter((msg) => msg.type === 'optical');
    expect(optical.length).toBeGreaterThan(0);
    expect(client.messages.some((msg) => msg.type === 'crystal')).toBe(true);
    expect(client.messages.some((msg) => msg.type === 'status' && msg.status.layer === 2)).toBe(true);
  });

  it('decimates a 1 kHz optical monitor to about 30 points per second', async () => {
    const m = manualRun(ar4, { profile: withOpticalRate(typical, 1000) });
    const url = await listen(m, tempDir('live'));
    const client = await connect(`${url}/api/live`);
    await client.until((msg) => msg.type === 'snapshot');
    m.run.runUntil(12);
    await pause(80);
    const points = client.messages.flatMap((msg) => (msg.type === 'optical' ? msg.points : [])).filter((p) => p[0] >= 2 && p[0] < 10);
    const readings = m.inputs.filter((i) => i.kind === 'reading' && i.channel === 'optical' && i.timeS >= 2 && i.timeS < 10);
    expect(readings.length).toBeGreaterThan(7900); // the input really was 1 kHz
    expect(points.length / 8).toBeGreaterThanOrEqual(29);
    expect(points.length / 8).toBeLessThanOrEqual(31);
    // The points are in time order and batched, not one message each.
    for (let i = 1; i < points.length; i++) expect((points[i] as number[])[0]).toBeGreaterThan((points[i - 1] as number[])[0] as number);
    expect(client.messages.filter((msg) => msg.type === 'optical').length).toBeLessThan(points.length / 4);
  });

  it('drops a client that stops reading to the latest state instead of buffering without bound', async () => {
    const m = manualRun(edge);
    const url = await listen(m, tempDir('live'), { live: { flushMs: 20, maxBufferedBytes: 16 * 1024 } });
    let socketOfClient: Socket | undefined;
    const client = await connect(`${url}/api/live`, {
      onUpgrade: (_ws, res) => {
        socketOfClient = res.socket;
        socketOfClient.pause(); // the client stops reading
      },
    });
    // The whole run, in chunks, letting the server's timers and sockets work in between.
    while (m.run.running) {
      m.run.runUntil(m.run.nowS + 120);
      await new Promise((resolve) => setImmediate(resolve));
    }
    await pause(100);
    const stats = apps[0]?.fringe.liveStats;
    expect(stats?.dropped).toBeGreaterThanOrEqual(1);
    socketOfClient?.resume();
    const resync = await client.until((msg) => msg.type === 'snapshot' && msg.reason === 'resync', 10000);
    if (resync.type !== 'snapshot') throw new Error('not a snapshot');
    // It is the latest state: the run has finished, every layer is past.
    expect(resync.snapshot.status.phase).toBe('finished');
    expect(resync.snapshot.layers.every((r) => r.status === 'past')).toBe(true);
    // What it missed was dropped, not queued: fewer events reached it than the run made.
    const received = client.messages.filter((msg) => msg.type === 'event').length;
    expect(received).toBeLessThan(m.events.length);
    expect(stats?.resyncs).toBeGreaterThanOrEqual(1);
  }, 30000);

  it('replays a recorded run through the controller: the same cuts as recorded', async () => {
    const runsDir = tempDir('replay');
    const recorded = startSimulatedRun({ recipe: ar4, profile: typical, seed: 5, speed: Number.POSITIVE_INFINITY, journalDir: runsDir });
    await recorded.done;
    const recordedCuts = recorded.hub.snapshot().log.map((e) => e.event).filter((e) => e.type === 'cut');
    const url = await listen(manualRun(ar4), runsDir);
    const client = await connect(`${url}/api/runs/${recorded.runId}/replay?speed=5000`);
    const first = await client.until(() => true);
    expect(first.type === 'snapshot' && first.snapshot.source).toBe('replay');
    await client.until((msg) => msg.type === 'event' && msg.event.type === 'run-finished', 10000);
    const cuts = client.messages.flatMap((msg) => (msg.type === 'snapshot' ? msg.snapshot.log.map((e) => e.event) : msg.type === 'event' ? [msg.event] : []));
    const unique = new Map(cuts.filter((e) => e.type === 'cut').map((e) => [e.layer, e]));
    expect([...unique.values()]).toEqual(JSON.parse(JSON.stringify(recordedCuts)));
    expect(apps[0]?.fringe.liveStats.replays).toBe(1);
    client.socket.close();
    await pause(50);
    expect(apps[0]?.fringe.liveStats.replays).toBe(0);
  });

  it('refuses unknown feeds, unknown runs, bad speeds, and viewers without the token when one is set', async () => {
    const runsDir = tempDir('refuse');
    const url = await listen(manualRun(ar4), runsDir);
    expect(await refusal(`${url}/api/elsewhere`)).toBe(404);
    // A page of another site may not read the feed through a browser; this server's own pages may.
    expect(await refusal(`${url}/api/live`, 'http://elsewhere.example')).toBe(403);
    const own = await connect(`${url}/api/live`, { origin: url.replace('ws:', 'http:') });
    expect((await own.until(() => true)).type).toBe('snapshot');
    expect(await refusal(`${url}/api/runs/nothing-here/replay`)).toBe(404);
    const recorded = startSimulatedRun({ recipe: ar4, profile: typical, seed: 2, speed: Number.POSITIVE_INFINITY, journalDir: runsDir });
    await recorded.done;
    expect(await refusal(`${url}/api/runs/${recorded.runId}/replay?speed=fast`)).toBe(400);

    const guarded = await listen(manualRun(ar4), runsDir, { host: '0.0.0.0', viewerToken: VIEWER_TOKEN });
    expect(await refusal(`${guarded}/api/live`)).toBe(401);
    const client = await connect(`${guarded}/api/live?viewer=${VIEWER_TOKEN}`);
    expect((await client.until(() => true)).type).toBe('snapshot');
  });

  it('refuses a Host that does not name this server with 421, even with an Origin to match it', async () => {
    const url = await listen(manualRun(ar4), tempDir('host'));
    const port = new URL(url).port;
    // The forged pair that used to open the feed.
    expect(await refusal(`${url}/api/live`, `http://evil.example:${port}`, `evil.example:${port}`)).toBe(421);
    expect(await refusal(`${url}/api/live`, undefined, `127.0.0.1:${Number(port) + 1}`)).toBe(421);
    expect(await refusal(`${url}/api/runs/any/replay`, undefined, 'evil.example')).toBe(421);
    // An absolute-form target names the host in place of the Host header.
    expect(await rawStatus(url, `GET http://evil.example:${port}/api/live HTTP/1.1\r\nHost: 127.0.0.1:${port}\r\n${UPGRADE_HEADERS}\r\n`)).toBe('HTTP/1.1 421 Misdirected Request');
    expect(await rawStatus(url, `GET http://evil.example:${port}/api/runs HTTP/1.1\r\nHost: 127.0.0.1:${port}\r\n\r\n`)).toBe('HTTP/1.1 421 Misdirected Request');
    expect(await rawStatus(url, `GET http://127.0.0.1:${port}/api/health HTTP/1.1\r\nHost: 127.0.0.1:${port}\r\n\r\n`)).toBe('HTTP/1.1 200 OK');
    const own = await connect(`${url}/api/live`, { origin: `http://localhost:${port}`, host: `localhost:${port}` });
    expect((await own.until(() => true)).type).toBe('snapshot');
  });

  it('answers to a name it was given, on its own port or on the port given with it', async () => {
    const url = await listen(manualRun(ar4), tempDir('host'), { host: '0.0.0.0', allowedHosts: ['coater-pc', 'localhost:8080'] });
    const port = new URL(url).port;
    expect((await (await connect(`${url}/api/live`, { host: `coater-pc:${port}` })).until(() => true)).type).toBe('snapshot');
    expect((await (await connect(`${url}/api/live`, { host: 'localhost:8080', origin: 'http://localhost:8080' })).until(() => true)).type).toBe('snapshot');
    expect(await refusal(`${url}/api/live`, undefined, 'coater-pc:8080')).toBe(421);
    expect(await refusal(`${url}/api/live`, undefined, `printer:${port}`)).toBe(421);
  });

  it('survives upgrade requests it cannot read: a malformed run id, a bad absolute-form host, a reset', async () => {
    const m = manualRun(ar4);
    const url = await listen(m, tempDir('hostile'));
    const port = new URL(url).port;
    const host = `Host: 127.0.0.1:${port}\r\n`;
    expect(await rawStatus(url, `GET /api/runs/%E0%A4%A/replay HTTP/1.1\r\n${host}${UPGRADE_HEADERS}\r\n`)).toBe('HTTP/1.1 404 Not Found');
    expect(await rawStatus(url, `GET /api/runs/%/replay?speed=%%% HTTP/1.1\r\n${host}${UPGRADE_HEADERS}\r\n`)).toBe('HTTP/1.1 404 Not Found');
    expect(await rawStatus(url, `GET http://[x/api/live HTTP/1.1\r\n${host}${UPGRADE_HEADERS}\r\n`)).toBe('HTTP/1.1 421 Misdirected Request');
    expect(await rawStatus(url, `GET /api/live HTTP/1.1\r\nHost: [x\r\n${UPGRADE_HEADERS}\r\n`)).toBe('HTTP/1.1 421 Misdirected Request');
    // A client that resets the connection right after asking: the refusal's write fails, quietly.
    for (let i = 0; i < 20; i++) {
      await new Promise<void>((resolve) => {
        const socket = connectTcp(Number(port), '127.0.0.1', () => {
          socket.write(`GET /nowhere HTTP/1.1\r\n${host}${UPGRADE_HEADERS}\r\n`);
          socket.resetAndDestroy();
          resolve();
        });
        socket.on('error', () => resolve());
      });
    }
    // Still serving.
    const client = await connect(`${url}/api/live`);
    expect((await client.until(() => true)).type).toBe('snapshot');
    expect(await rawStatus(url, `GET /api/health HTTP/1.1\r\n${host}\r\n`)).toBe('HTTP/1.1 200 OK');
  });
});

describe('viewers that stop reading', () => {
  /** A viewer that stops reading its socket as soon as it has connected. */
  async function stalled(url: string): Promise<{ client: Client; socket: Socket }> {
    let socket: Socket | undefined;
    const client = await connect(url, {
      onUpgrade: (_ws, res) => {
        socket = res.socket;
        socket.pause();
      },
    });
    if (!socket) throw new Error('no socket');
    return { client, socket };
  }

  /** Resolves once the server has had this client's answer to the ping it sent on connecting. */
  async function answeredPing(client: Client): Promise<void> {
    // The client answers the server's ping before it sees it; its own ping follows that answer,
    // so the server's pong to it proves the answer arrived.
    await client.pinged;
    await new Promise((resolve) => {
      client.socket.once('pong', resolve);
      client.socket.ping();
    });
  }

  it('do not lock others out: at the limit a newcomer takes the place of the longest stalled', async () => {
    const m = manualRun(ar4);
    // No periodic pings during the test: only the ping on connecting tells who has stalled.
    const url = await listen(m, tempDir('stall'), { live: { flushMs: 20, pingMs: 600_000 } });
    const stalledViewers: { client: Client; socket: Socket }[] = [];
    for (let i = 0; i < 32; i++) stalledViewers.push(await stalled(`${url}/api/live`));
    const stats = apps[0]?.fringe.liveStats;
    expect(stats?.clients).toBe(32);
    const newcomer = await connect(`${url}/api/live`);
    expect((await newcomer.until(() => true)).type).toBe('snapshot');
    expect(stats?.clients).toBe(32);
    expect(stats?.evicted).toBe(1);
    // The first to stall was the one to go; the second is still served once it reads again.
    const [first, second] = stalledViewers;
    if (!first || !second) throw new Error('no viewers');
    const closed = new Promise((resolve) => first.client.socket.once('close', resolve));
    first.socket.resume();
    await closed;
    second.socket.resume();
    await answeredPing(second.client);
    expect(second.client.socket.readyState).toBe(WebSocket.OPEN);
  });

  it('never push out the operator, however many stalled viewers come after', async () => {
    const m = manualRun(ar4);
    const url = await listen(m, tempDir('stall'), { live: { flushMs: 20, pingMs: 600_000 } });
    const operator = await connect(`${url}/api/live`);
    await answeredPing(operator);
    for (let i = 0; i < 31 + 40; i++) await stalled(`${url}/api/live`);
    const stats = apps[0]?.fringe.liveStats;
    expect(stats?.clients).toBe(32);
    expect(stats?.evicted).toBe(40);
    expect(operator.socket.readyState).toBe(WebSocket.OPEN);
    // And the operator still follows the run.
    m.run.runUntil(150);
    await operator.until((msg) => msg.type === 'event' && msg.event.type === 'cut');
  });

  it('still fill the door when every viewer reads: the newcomer is told to try later', async () => {
    const m = manualRun(ar4);
    const url = await listen(m, tempDir('stall'), { live: { flushMs: 20, pingMs: 600_000, maxClients: 3 } });
    for (let i = 0; i < 3; i++) await answeredPing(await connect(`${url}/api/live`));
    expect(await refusal(`${url}/api/live`)).toBe(503);
    expect(apps[0]?.fringe.liveStats.evicted).toBe(0);
  });
});
