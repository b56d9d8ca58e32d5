// The live feed over a real WebSocket on an ephemeral port: the snapshot first, then every event
// and decimated readings; a slow client dropped to the latest state; a recorded run replayed;
// refusals at the door.
import type { IncomingMessage } from 'node:http';
import type { AddressInfo, Socket } from 'node:net';
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
  /** Resolves when a message satisfying `test` has arrived (or has already). */
  until(test: (m: Message) => boolean, timeoutMs?: number): Promise<Message>;
}

function connect(url: string, hooks: { origin?: string; onUpgrade?: (socket: WebSocket, res: IncomingMessage) => void } = {}): Promise<Client> {
  const socket = new WebSocket(url, hooks.origin === undefined ? {} : { origin: hooks.origin });
  sockets.push(socket);
  const messages: Message[] = [];
  const waiters: { test: (m: Message) => boolean; resolve: (m: Message) => void }[] = [];
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
function refusal(url: string, origin?: string): Promise<number> {
  return new Promise((resolve, reject) => {
    const socket = new WebSocket(url, origin === undefined ? {} : { origin });
    socket.on('unexpected-response', (_req, res) => resolve(res.statusCode ?? 0));
    socket.on('open', () => reject(new Error('the upgrade was accepted')));
    socket.on('error', () => undefined);
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
});
