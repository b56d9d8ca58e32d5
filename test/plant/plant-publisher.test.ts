// Publishing runs to a real broker (Debian's mosquitto, started here on a free port): every
// event once and in order, the retained state and summary, the broker killed and restarted
// mid-run (nothing of QoS 1 lost within the queue's bound, the oldest dropped beyond it, with
// a count), a broker that refuses us, and the cut times of every run identical to a run with no
// broker at all. Without mosquitto the suite is skipped, except in CI (CI=true), where it fails.
import { spawn } from 'node:child_process';
import { mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { connect, type IClientOptions, type MqttClient } from 'mqtt';
import { afterAll, afterEach, describe, expect, it } from 'vitest';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { serveOnTcp } from '../../sim/index.ts';
import { runLive } from '../../src/cli/commands/run.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import { plantPlan } from '../../src/cli/plant-options.ts';
import { PUBLISHED_EVENTS, type PlantEvent, type PlantLayer, type PlantState, type PlantSummary } from '../../src/plant/plant-messages.ts';
import { createPlantPublisher, type PlantPublisher } from '../../src/plant/plant-publisher.ts';
import { PlantSettingsSchema } from '../../src/plant/plant-settings.ts';
import { ar4, manualRun, typical, type ManualRun } from '../server/support.ts';
import { freePort, haveMosquitto, inCi, MOSQUITTO, startTestBroker, until, type TestBroker } from '../support/broker.ts';

type AlertEvent = Extract<RunEvent, { type: 'alert' }>;

interface Received {
  topic: string;
  payload: { v: number } & Record<string, unknown>;
  retain: boolean;
  qos: number;
}

/** A subscriber to everything under fringe/, its messages kept in arrival order. */
async function subscriber(url: string, options: IClientOptions = {}): Promise<{ client: MqttClient; messages: Received[] }> {
  const messages: Received[] = [];
  const client = connect(url, { reconnectPeriod: 100, ...options });
  client.on('message', (topic, payload, packet) => messages.push({ topic, payload: JSON.parse(payload.toString('utf8')) as Received['payload'], retain: packet.retain, qos: packet.qos }));
  client.on('error', () => undefined);
  await new Promise<void>((resolve, reject) => {
    client.once('connect', () => resolve());
    client.once('error', reject);
  });
  await client.subscribeAsync('fringe/#', { qos: 1 });
  return { client, messages };
}

/** A stepped AR run publishing to `url`, with the alerts the publisher raised kept apart. */
function publishedRun(url: string, settings: Record<string, unknown> = {}, extra: { credentials?: { username: string; password: string } } = {}) {
  const m = manualRun(ar4);
  const raised: AlertEvent[] = [];
  // Everything the hub passes on, as a subscriber of the hub sees it (broker alerts included).
  const hubEvents: RunEvent[] = [];
  m.hub.subscribe((message) => {
    if (message.type === 'event') hubEvents.push(message.event);
  });
  const publisher = createPlantPublisher({
    settings: PlantSettingsSchema.parse({ url, chamber: 'c1', ...settings }),
    chamber: 'c1',
    hub: m.hub,
    ...extra,
    raise(alert) {
      raised.push(alert);
      m.hub.feed.event(alert);
    },
    client: { reconnectPeriod: 100 },
  });
  return { m, raised, hubEvents, publisher };
}

/** Steps the run to `untilS` (or its end) in chunks, letting the event loop (the publisher) run between them. */
async function step(m: ManualRun, done: (events: RunEvent[]) => boolean): Promise<void> {
  while (m.run.running && !done(m.events)) {
    m.run.runUntil(m.run.nowS + 5);
    await new Promise((r) => setImmediate(r));
  }
}

const finished = (layer: number) => (events: RunEvent[]) => events.some((e) => e.type === 'layer-finished' && e.layer === layer);
const cutsOf = (events: readonly RunEvent[]) => events.filter((e) => e.type === 'cut');
const ofTopic = (messages: Received[], topic: string) => messages.filter((x) => x.topic === `fringe/c1/${topic}`);
const seqs = (messages: Received[]) => ofTopic(messages, 'events').map((x) => (x.payload as unknown as PlantEvent).seq);

/** The AR run with no broker at all: the decisions every published run must repeat. */
function cutsWithoutBroker(): RunEvent[] {
  const m = manualRun(ar4);
  m.run.runUntil(Number.POSITIVE_INFINITY);
  return cutsOf(m.events);
}

if (!haveMosquitto && inCi) {
  describe('plant publishing to mosquitto', () => {
    it('needs mosquitto in CI', () => {
      throw new Error(`${MOSQUITTO} is missing: install it (apt-get install -y mosquitto); in CI this test must run, not skip`);
    });
  });
} else if (!haveMosquitto) {
  describe.skip(`plant publishing to mosquitto — skipped: ${MOSQUITTO} is missing (apt-get install -y mosquitto to run it)`, () => {
    it('publishes a run', () => undefined);
  });
} else {
  describe('plant publishing to mosquitto', () => {
    const brokers: TestBroker[] = [];
    const clients: MqttClient[] = [];
    const publishers: PlantPublisher[] = [];
    const broker = async (options: Parameters<typeof startTestBroker>[0] = {}): Promise<TestBroker> => {
      const b = await startTestBroker(options);
      brokers.push(b);
      return b;
    };
    afterEach(async () => {
      for (const p of publishers.splice(0)) await p.close(500);
      for (const c of clients.splice(0)) await c.endAsync(true);
    });
    afterAll(async () => {
      for (const b of brokers) await b.stop();
    });

    it('publishes every event once and in order, each layer, the summary, readings and the retained state', async () => {
      const b = await broker();
      const sub = await subscriber(b.url);
      clients.push(sub.client);
      const { m, raised, hubEvents, publisher } = publishedRun(b.url, { readingsPerS: 1 });
      publishers.push(publisher);
      await until(() => publisher.stats().connected, 'the publisher to connect');
      publisher.setDashboard('http://127.0.0.1:7300/');
      await step(m, () => false);
      const stats = await publisher.close();
      publishers.length = 0;
      await until(() => ofTopic(sub.messages, 'summary').length === 1, 'the run summary');

      expect(raised).toEqual([]);
      const expected = hubEvents.filter((e) => PUBLISHED_EVENTS.has(e.type));
      expect(expected.filter((e) => e.type === 'cut')).toHaveLength(4);
      const events = ofTopic(sub.messages, 'events');
      expect(seqs(sub.messages)).toEqual(expected.map((_, i) => i + 1));
      expect(events.map((x) => (x.payload as unknown as PlantEvent).event)).toEqual(JSON.parse(JSON.stringify(expected)));
      const layers = ofTopic(sub.messages, 'layers').map((x) => (x.payload as unknown as PlantLayer).layer);
      expect(layers.map((l) => l.number)).toEqual([1, 2, 3, 4]);
      for (const l of layers) expect(l.estimatedNm).toBeGreaterThan(0);
      const summary = (ofTopic(sub.messages, 'summary')[0]?.payload as unknown as PlantSummary).summary;
      expect(summary.outcome).toBe('complete');
      expect(summary.layers.map((l) => l.estimatedNm)).toEqual(layers.map((l) => l.estimatedNm));
      // Readings: decimated to one a second of run time per channel, QoS 0.
      const optical = ofTopic(sub.messages, 'readings').filter((x) => x.payload.channel === 'optical').map((x) => x.payload.timeS as number);
      expect(optical.length).toBeGreaterThan(100);
      for (let i = 1; i < optical.length; i++) expect((optical[i] as number) - (optical[i - 1] as number)).toBeGreaterThanOrEqual(1);
      for (const x of sub.messages) {
        expect(x.payload.v).toBe(1);
        expect(x.payload.chamber).toBe('c1');
      }
      const states = ofTopic(sub.messages, 'state').map((x) => x.payload as unknown as PlantState);
      expect(states.some((s) => s.online && s.dashboard === 'http://127.0.0.1:7300/' && s.status?.phase === 'depositing')).toBe(true);
      expect(states.at(-1)).toMatchObject({ online: false, recipe: ar4.name });
      expect(stats).toMatchObject({ dropped: 0, waiting: 0 });
      expect(stats.acknowledged).toBe(expected.length + 4 + 1);

      // The publisher said goodbye (a DISCONNECT), so the broker discarded the will: a dropped
      // socket would have had the will (no time, nothing dropped) replace the final state.
      const goodbye = (): string | undefined => b.log.find((line) => /Client fringe-c1-\S+ (disconnected|closed its connection)/.test(line));
      await until(() => goodbye() !== undefined, 'the broker to see the publisher go');
      expect(goodbye()).toMatch(/ disconnected\.$/);
      // A subscriber that comes later is handed the retained state and summary at once.
      const late = await subscriber(b.url);
      clients.push(late.client);
      await until(() => late.messages.length >= 2, 'the retained messages');
      expect(late.messages.every((x) => x.retain)).toBe(true);
      expect(late.messages.map((x) => x.topic).sort()).toEqual(['fringe/c1/state', 'fringe/c1/summary']);
      const retained = ofTopic(late.messages, 'state')[0]?.payload as unknown as PlantState;
      expect(retained).toMatchObject({ online: false, runId: states.at(-1)?.runId });
      expect(retained.at).not.toBeNull();
      expect(cutsOf(m.events)).toEqual(cutsWithoutBroker());
    });

    /** The AR run with the broker stopped over layers 2 and 3, and back for the 4th. */
    async function outage(queueLimit: number) {
      const b = await broker({ persistent: true });
      // A persistent session, so that what is published before the subscriber is back waits for it.
      const sub = await subscriber(b.url, { clientId: `watcher-${queueLimit}`, clean: false });
      clients.push(sub.client);
      const run = publishedRun(b.url, { queueLimit, readingsPerS: 0 });
      publishers.push(run.publisher);
      const { m, raised, hubEvents, publisher } = run;
      await until(() => publisher.stats().connected, 'the publisher to connect');
      await step(m, finished(1));
      const before = hubEvents.filter((e) => PUBLISHED_EVENTS.has(e.type)).length;
      await until(() => seqs(sub.messages).length === before, 'the first layer to be received');
      // And acknowledged to the broker, or it would hand them again to the session it restores.
      const acks = (): number => b.log.filter((line) => line.includes(`Received PUBACK from watcher-${queueLimit} `)).length;
      await until(() => acks() === sub.messages.length, 'the watcher\'s acknowledgements');

      await b.stop();
      await until(() => raised.some((a) => a.code === 'broker-unreachable'), 'the unreachable alert');
      await step(m, finished(3));
      const made = hubEvents.filter((e) => PUBLISHED_EVENTS.has(e.type)).length;
      expect(ofTopic(sub.messages, 'readings')).toEqual([]);
      const waitingInOutage = publisher.stats().waiting;
      await b.start();
      await until(() => raised.some((a) => a.code === 'broker-restored'), 'the restored alert');
      await step(m, () => false);
      const stats = await publisher.close(10_000);
      publishers.length = 0;
      await until(() => ofTopic(sub.messages, 'summary').length === 1, 'the run summary');
      // The last state: offline on purpose (the will, sent while the broker was down, has no time).
      await until(() => ofTopic(sub.messages, 'state').some((x) => x.payload.online === false && x.payload.at !== null), 'the final state');
      const total = hubEvents.filter((e) => PUBLISHED_EVENTS.has(e.type)).length;
      return { m, raised, stats, sub, before, made, total, waitingInOutage };
    }

    it('keeps every QoS 1 message through a broker restart within the queue bound, decisions unchanged', async () => {
      const { m, raised, stats, sub, before, made, total, waitingInOutage } = await outage(1000);
      expect(made).toBeGreaterThan(before + 4);
      expect(waitingInOutage).toBeGreaterThan(4);
      expect(seqs(sub.messages)).toEqual(Array.from({ length: total }, (_, i) => i + 1));
      expect(ofTopic(sub.messages, 'layers').map((x) => (x.payload as unknown as PlantLayer).layer.number)).toEqual([1, 2, 3, 4]);
      expect(stats.dropped).toBe(0);
      expect(raised.map((a) => [a.code, a.severity])).toEqual([
        ['broker-unreachable', 'info'],
        ['broker-restored', 'info'],
      ]);
      expect(raised[1]?.message).toMatch(/nothing was dropped/);
      // The broker's alerts reach the plant too, once it is back.
      const codes = ofTopic(sub.messages, 'events').map((x) => (x.payload as unknown as PlantEvent).event).filter((e) => e.type === 'alert').map((e) => e.code);
      expect(codes).toEqual(expect.arrayContaining(['broker-unreachable', 'broker-restored']));
      expect(cutsOf(m.events)).toEqual(cutsWithoutBroker());
    });

    it('drops the oldest beyond the bound, counts them and says so when the broker is back', async () => {
      const { m, raised, stats, sub, before, made } = await outage(5);
      const got = seqs(sub.messages);
      // Received once each, in order.
      expect(got).toEqual([...new Set(got)].sort((a, b) => a - b));
      const missing = Array.from({ length: Math.max(...got) }, (_, i) => i + 1).filter((s) => !got.includes(s));
      expect(missing.length).toBeGreaterThan(0);
      // The gap is the oldest of the outage: right after what the broker had, none after it.
      expect(missing[0]).toBe(before + 1);
      expect(missing).toEqual(Array.from({ length: missing.length }, (_, i) => before + 1 + i));
      expect(missing.at(-1)).toBeLessThanOrEqual(made + 1);
      const layersMissing = 4 - ofTopic(sub.messages, 'layers').length;
      expect(stats.dropped).toBe(missing.length + layersMissing);
      expect(raised[1]?.message).toContain(`${stats.dropped} messages were dropped while it was away (the queue holds 5)`);
      const lastState = ofTopic(sub.messages, 'state').map((x) => x.payload as unknown as PlantState).at(-1);
      expect(lastState?.dropped).toBe(stats.dropped);
      expect(cutsOf(m.events)).toEqual(cutsWithoutBroker());
    });

    it('runs on unchanged against a broker that refuses it, with one informational alert; connects with the credentials from a file', async () => {
      const b = await broker({ users: { chamber: 'right-password' } });
      const refused = publishedRun(b.url);
      publishers.push(refused.publisher);
      await until(() => refused.raised.length > 0, 'the unreachable alert');
      await step(refused.m, () => false);
      // It tries again (every 100 ms), and is refused again: still the one alert.
      await until(() => b.log.filter((line) => line.includes('New connection from')).length >= 3, 'three refused attempts');
      expect(refused.raised.map((a) => [a.code, a.severity])).toEqual([['broker-unreachable', 'info']]);
      expect(refused.raised[0]?.message).toMatch(/Not authorized/i);
      expect(cutsOf(refused.m.events)).toEqual(cutsWithoutBroker());
      const stats = await refused.publisher.close(500);
      publishers.length = 0;
      expect(stats.acknowledged).toBe(0);
      expect(stats.waiting).toBeGreaterThan(0);

      // The credentials from a file named in the chamber's plant section, relative to it.
      const dir = mkdtempSync(join(tmpdir(), 'fringe-plant-'));
      writeFileSync(join(dir, 'broker.yaml'), 'username: chamber\npassword: right-password\n');
      const plan = plantPlan({}, 'c1', { settings: PlantSettingsSchema.parse({ url: b.url, credentialsFile: 'broker.yaml' }), file: join(dir, 'chamber.yaml') });
      expect(plan?.credentials).toEqual({ username: 'chamber', password: 'right-password' });
      const sub = await subscriber(b.url, { username: 'chamber', password: 'right-password' });
      clients.push(sub.client);
      const accepted = publishedRun(b.url, {}, { credentials: plan?.credentials as { username: string; password: string } });
      publishers.push(accepted.publisher);
      await until(() => ofTopic(sub.messages, 'state').length > 0, 'the state from a publisher with credentials');
      expect(accepted.raised).toEqual([]);
    });

    it('fringe demo --mqtt publishes its dashboard; killed, its last will marks the chamber offline', async () => {
      const b = await broker();
      const sub = await subscriber(b.url);
      clients.push(sub.client);
      const fringe = fileURLToPath(new URL('../../src/cli/fringe.js', import.meta.url));
      const child = spawn(process.execPath, [fringe, 'demo', '--port', '0', '--speed', '5', '--runs', mkdtempSync(join(tmpdir(), 'fringe-demo-')), '--mqtt', b.url, '--mqtt-chamber', 'demo-1'], { stdio: 'ignore' });
      try {
        const states = () => sub.messages.filter((x) => x.topic === 'fringe/demo-1/state').map((x) => x.payload as unknown as PlantState);
        await until(() => states().some((s) => s.online && s.status?.phase === 'depositing' && s.dashboard !== null), 'the demo to publish its state');
        const dashboard = states().find((s) => s.dashboard !== null)?.dashboard as string;
        expect(dashboard).toMatch(/^http:\/\/127\.0\.0\.1:\d+\/$/);
        expect(await (await fetch(dashboard)).text()).toContain('<title>fringe · run</title>');
        child.kill('SIGKILL');
        await until(() => states().at(-1)?.online === false, 'the last will');
        expect(states().at(-1)).toMatchObject({ v: 1, chamber: 'demo-1', online: false, at: null, source: 'simulated' });
      } finally {
        child.kill('SIGKILL');
      }
    });

    it('fringe run publishes a live run to the broker its chamber file names, as its journal records it', async () => {
      const b = await broker();
      const sub = await subscriber(b.url);
      clients.push(sub.client);
      const dir = mkdtempSync(join(tmpdir(), 'fringe-live-plant-'));
      // At 20× real time: gentle on a loaded machine (the run takes about 30 s).
      const served = await serveOnTcp({ recipe: ar4, profile: typical, seed: 4, speed: 20, port: 0 });
      const chamber = join(dir, 'chamber.yaml');
      writeFileSync(
        chamber,
        `formatVersion: 1
name: Box coater 2
instruments:
  - id: monitor
    transport: { kind: tcp, host: 127.0.0.1, port: ${served.port} }
    channels: [optical, crystal]
shutters:
  transport: monitor
  ack: { timeoutMs: 1000 }
plant:
  url: ${b.url}
  readingsPerS: 0
`,
      );
      const recipeFile = fileURLToPath(new URL('../../config/recipes/ar4-visible.yaml', import.meta.url));
      let code: number;
      let err = '';
      try {
        code = await runLive(['--chamber', chamber, '--clock', 'instrument', '--runs', join(dir, 'runs'), recipeFile], { out: () => undefined, err: (t) => (err += `${t}\n`) });
      } finally {
        await served.close();
      }
      expect(code, err).toBe(0);
      expect(err).toContain(`publishing to ${b.url} as fringe/Box-coater-2/`);
      expect(err).not.toMatch(/did not receive/);
      const runDir = join(dir, 'runs', readdirSync(join(dir, 'runs'))[0] as string);
      const journalled = readJournal(join(runDir, 'journal.ndjson')).records.flatMap((r): RunEvent[] => (r.k === 'e' && PUBLISHED_EVENTS.has(r.event.type) ? [r.event] : []));
      const topic = (t: string) => sub.messages.filter((x) => x.topic === `fringe/Box-coater-2/${t}`);
      await until(() => topic('summary').length === 1 && topic('events').length === journalled.length, 'the live run on the broker');
      const events = topic('events').map((x) => x.payload as unknown as PlantEvent);
      expect(events.map((e) => e.seq)).toEqual(journalled.map((_, i) => i + 1));
      expect(events.map((e) => e.event)).toEqual(JSON.parse(JSON.stringify(journalled)));
      expect(events.filter((e) => e.event.type === 'cut')).toHaveLength(4);
      const states = topic('state').map((x) => x.payload as unknown as PlantState);
      expect(states.some((s) => s.online && s.source === 'live' && s.dashboard === null)).toBe(true);
      expect(states.at(-1)).toMatchObject({ online: false, runId: runDir.split(/[\\/]/).pop() });
    }, 180_000);

    it('raises one alert when nothing listens at the address, and the run cuts as without a broker', async () => {
      const port = await freePort();
      const run = publishedRun(`mqtt://127.0.0.1:${port}`);
      publishers.push(run.publisher);
      await until(() => run.raised.length > 0, 'the unreachable alert');
      await step(run.m, () => false);
      expect(run.raised.map((a) => a.code)).toEqual(['broker-unreachable']);
      expect(run.raised[0]?.message).toContain(`mqtt://127.0.0.1:${port}`);
      expect(run.m.hub.alertHistory().map((a) => a.code)).toContain('broker-unreachable');
      expect(cutsOf(run.m.events)).toEqual(cutsWithoutBroker());
    });
  });
}
