// The HTTP API through app.inject(): health, the run on show, the runs folder, the command
// routes and their token, the viewer token, and logs that never carry a token.
import { mkdirSync, rmSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { Writable } from 'node:stream';
import type { FastifyInstance } from 'fastify';
import { afterEach, beforeAll, describe, expect, it } from 'vitest';
import { readJournal } from '../../src/journal/journal-reader.ts';
import { DASHBOARD_WORDS } from '../../src/pipeline/cut-words.ts';
import { buildServer, type ServerOptions } from '../../src/server/build-server.ts';
import { startSimulatedRun } from '../../src/server/simulated-run.ts';
import { ar4, manualRun, tempDir, TOKEN, typical, VIEWER_TOKEN, type ManualRun } from './support.ts';

const bearer = (token: string) => ({ authorization: `Bearer ${token}` });
let apps: FastifyInstance[] = [];
afterEach(async () => {
  await Promise.all(apps.map((a) => a.close()));
  apps = [];
});

function serve(m: ManualRun, runsDir: string, options: Partial<ServerOptions> = {}): FastifyInstance {
  const app = buildServer({ hub: m.hub, runsDir }, { token: TOKEN, host: '127.0.0.1', ...options });
  apps.push(app);
  return app;
}

/** A runs folder with one finished simulated run (recorded at full speed) and one without a summary. */
let runsDir: string;
let recordedId: string;
beforeAll(async () => {
  runsDir = tempDir('runs');
  const recorded = startSimulatedRun({ recipe: ar4, profile: typical, seed: 3, speed: Number.POSITIVE_INFINITY, journalDir: runsDir });
  await recorded.done;
  recordedId = recorded.runId;
  mkdirSync(join(runsDir, 'unfinished'));
  writeFileSync(
    join(runsDir, 'unfinished', 'journal.ndjson'),
    `${JSON.stringify({ journal: 'fringe', version: 1, runId: 'unfinished', startedAt: '2026-01-01T00:00:00.000Z', recipe: 'partial', meta: { source: 'live' } })}\n`,
  );
  mkdirSync(join(runsDir, 'not-a-run'));
});

describe('health and the run on show', () => {
  it('GET /api/health says the server is up and what the run is doing', async () => {
    const m = manualRun(ar4);
    const app = serve(m, runsDir);
    const r = await app.inject({ method: 'GET', url: '/api/health' });
    expect(r.statusCode).toBe(200);
    expect(r.json()).toMatchObject({ ok: true, run: { source: 'simulated', phase: 'depositing', running: true }, liveClients: 0 });
  });

  it('GET /api/run gives the state, the recipe and the plan', async () => {
    const m = manualRun(ar4);
    m.run.runUntil(50);
    const app = serve(m, runsDir);
    const body = (await app.inject({ method: 'GET', url: '/api/run' })).json<Record<string, unknown>>();
    expect(body.status).toMatchObject({ phase: m.run.state.phase, layer: m.run.state.index + 1, layers: 4 });
    expect(body.recipe).toMatchObject({ name: ar4.name, layers: 4, band: { fromNm: 420, toNm: 680 } });
    const plan = body.plan as { fromLayer: number; layers: { number: number; cut: string }[] };
    // Re-planned after layer 1: the plan now starts at the current layer.
    expect(plan.fromLayer).toBe(m.run.state.plan.fromLayer);
    expect(plan.layers.map((l) => l.number)).toEqual(m.run.state.plan.layers.map((l) => l.number));
    expect((body.layers as unknown[]).length).toBe(4);
  });

  it('GET /api/run/snapshot is what the live feed sends first', async () => {
    const m = manualRun(ar4);
    m.run.runUntil(20);
    const app = serve(m, runsDir);
    const body = (await app.inject({ method: 'GET', url: '/api/run/snapshot' })).json<Record<string, unknown>>();
    expect(JSON.parse(JSON.stringify(m.hub.snapshot()))).toEqual(body);
  });

  it('serves the page, its script and uPlot, with a content security policy', async () => {
    const app = serve(manualRun(ar4), runsDir);
    const page = await app.inject({ method: 'GET', url: '/' });
    expect(page.statusCode).toBe(200);
    expect(page.headers['content-type']).toMatch(/text\/html/);
    expect(page.body).toContain('not a safety system');
    expect(page.headers['content-security-policy']).toContain("default-src 'self'");
    for (const url of ['/app.js', '/charts.js', '/chart-export.js', '/format.js', '/style.css', '/vendor/uplot/uPlot.esm.js', '/vendor/uplot/uPlot.min.css']) {
      expect((await app.inject({ method: 'GET', url })).statusCode, url).toBe(200);
    }
  });

  it('serves the words for estimators and cut rules as a module, from the one the command line prints', async () => {
    const app = serve(manualRun(ar4), runsDir);
    const words = await app.inject({ method: 'GET', url: '/words.js' });
    expect(words.statusCode).toBe(200);
    expect(words.headers['content-type']).toMatch(/^text\/javascript/);
    expect(words.headers['content-security-policy']).toContain("script-src 'self'");
    const json = /export const WORDS = (.*);\n$/.exec(words.body)?.[1];
    expect(JSON.parse(json ?? 'null')).toEqual(DASHBOARD_WORDS);
    expect(DASHBOARD_WORDS.reason['model-fit']).toBe('model fit');
  });
});

describe('the runs folder', () => {
  it('lists past runs, newest first, with their summaries', async () => {
    const app = serve(manualRun(ar4), runsDir);
    const { runs } = (await app.inject({ method: 'GET', url: '/api/runs' })).json<{ runs: Record<string, unknown>[] }>();
    expect(runs.map((r) => r.id)).toEqual([recordedId, 'unfinished']);
    expect(runs[0]).toMatchObject({ recipe: ar4.name, source: 'simulator', outcome: 'complete', layers: 4, replayable: true });
    expect(runs[0]?.durationS).toBeGreaterThan(100);
    expect(runs[1]).toMatchObject({ outcome: 'in progress', layers: null, replayable: false });
  });

  it('shows a run’s calibration in one line, numbers only, and nothing from a damaged one', async () => {
    const app = serve(manualRun(ar4), runsDir);
    const figure = (value: unknown, sigma: unknown) => ({ value, sigma });
    // As fringe calibrate writes it, with a hostile name and a non-number among the figures.
    writeFileSync(
      join(runsDir, recordedId, 'calibration.json'),
      JSON.stringify({ materials: { SiO2: { indexFactor: figure(1.01004, 0.00005), chipRatio: figure(1.0068, 0.0015), toolingFactor: figure('<b>', 0.1) } }, layers: [] }),
    );
    writeFileSync(join(runsDir, 'unfinished', 'calibration.json'), '{"materials": [1, 2');
    try {
      const { runs } = (await app.inject({ method: 'GET', url: '/api/runs' })).json<{ runs: Record<string, unknown>[] }>();
      expect(runs[0]?.calibration).toBe('SiO2: n ×1.0100 ± 0.0001, chip 1.0068 ± 0.0015');
      expect(runs[1]?.calibration).toBeNull();
    } finally {
      rmSync(join(runsDir, recordedId, 'calibration.json'));
      rmSync(join(runsDir, 'unfinished', 'calibration.json'));
    }
  });

  it('gives one run’s summary and its journal as a download', async () => {
    const app = serve(manualRun(ar4), runsDir);
    const detail = (await app.inject({ method: 'GET', url: `/api/runs/${recordedId}` })).json<{ summary: { layers: { cutReason: string }[] }; header: { runId: string } }>();
    expect(detail.header.runId).toBe(recordedId);
    expect(detail.summary.layers).toHaveLength(4);
    expect(detail.summary.layers[0]?.cutReason).toBe('crystal-thickness');
    const journal = await app.inject({ method: 'GET', url: `/api/runs/${recordedId}/journal` });
    expect(journal.statusCode).toBe(200);
    expect(journal.headers['content-type']).toMatch(/application\/x-ndjson/);
    expect(journal.headers['content-disposition']).toContain('attachment');
    const records = readJournal(join(runsDir, recordedId, 'journal.ndjson')).records;
    expect(journal.body.trim().split('\n')).toHaveLength(records.length + 1);
  });

  it('answers 404 for an unknown run and refuses an id that could leave the folder', async () => {
    const app = serve(manualRun(ar4), runsDir);
    expect((await app.inject({ method: 'GET', url: '/api/runs/no-such-run' })).statusCode).toBe(404);
    expect((await app.inject({ method: 'GET', url: '/api/runs/not-a-run' })).statusCode).toBe(404);
    const dotted = await app.inject({ method: 'GET', url: '/api/runs/..%2F..%2Fetc/journal' });
    expect(dotted.statusCode).toBe(400);
    expect(dotted.json<{ message: string }>().message).toMatch(/params\/id/);
  });

  it('is an empty list when the runs folder does not exist', async () => {
    const app = serve(manualRun(ar4), join(tempDir('none'), 'missing'));
    expect((await app.inject({ method: 'GET', url: '/api/runs' })).json()).toEqual({ runs: [] });
  });
});

describe('commands', () => {
  it('refuses a command without the token, or with a wrong one (401), before reading the body', async () => {
    const m = manualRun(ar4);
    const app = serve(m, runsDir);
    const none = await app.inject({ method: 'POST', url: '/api/commands/abort', payload: {} });
    expect(none.statusCode).toBe(401);
    expect(none.json<{ message: string }>().message).toMatch(/command token/);
    expect(none.headers['www-authenticate']).toMatch(/^Bearer/);
    const wrong = await app.inject({ method: 'POST', url: '/api/commands/abort', headers: bearer('not-the-token-at-all'), payload: {} });
    expect(wrong.statusCode).toBe(401);
    const longer = await app.inject({ method: 'POST', url: '/api/commands/abort', headers: bearer(`${TOKEN}x`), payload: {} });
    expect(longer.statusCode).toBe(401);
    const prefix = await app.inject({ method: 'POST', url: '/api/commands/abort', headers: bearer(TOKEN.slice(0, -1)), payload: {} });
    expect(prefix.statusCode).toBe(401);
    // A bad body without the token is still 401: nothing is said about the body to a stranger.
    const badBody = await app.inject({ method: 'POST', url: '/api/commands/acknowledge', payload: { nonsense: true } });
    expect(badBody.statusCode).toBe(401);
    expect(m.run.state.phase).toBe('depositing');
  });

  it('applies a command with the right token and says what happened', async () => {
    const m = manualRun(ar4);
    m.run.runUntil(10);
    const app = serve(m, runsDir);
    const r = await app.inject({ method: 'POST', url: '/api/commands/hold', headers: bearer(TOKEN), payload: {} });
    expect(r.statusCode).toBe(200);
    const body = r.json<{ applied: boolean; timeS: number; events: { type: string }[] }>();
    expect(body.applied).toBe(true);
    expect(body.timeS).toBe(m.run.nowS);
    expect(body.events.map((e) => e.type)).toEqual(['held', 'shutter']);
    // It reached the run: the controller is holding and the operator command is among its inputs.
    expect(m.run.state.phase).toBe('holding');
    expect(m.inputs.at(-1)).toEqual({ kind: 'operator', action: 'hold', timeS: m.run.nowS });
    // A body is optional for commands that take none.
    const resume = await app.inject({ method: 'POST', url: '/api/commands/resume', headers: bearer(TOKEN) });
    expect(resume.statusCode).toBe(200);
    expect(m.run.state.phase).toBe('depositing');
    expect((await app.inject({ method: 'GET', url: '/api/commands', headers: bearer(TOKEN) })).json()).toEqual({
      actions: ['start', 'hold', 'resume', 'cut-now', 'skip-layer', 'abort', 'acknowledge'],
      commandsAccepted: true,
    });
  });

  it('answers 409 with the reason when the run cannot take the command now', async () => {
    const m = manualRun(ar4);
    const app = serve(m, runsDir);
    const r = await app.inject({ method: 'POST', url: '/api/commands/resume', headers: bearer(TOKEN), payload: {} });
    expect(r.statusCode).toBe(409);
    expect(r.json<{ message: string }>().message).toBe('resume: only a run on hold or waiting for a shutter to close can be resumed; the run is depositing');
    const ack = await app.inject({ method: 'POST', url: '/api/commands/acknowledge', headers: bearer(TOKEN), payload: { alertId: 'A7' } });
    expect(ack.statusCode).toBe(409);
    expect(ack.json<{ message: string }>().message).toBe('acknowledge: alert A7 is not open');
  });

  it('refuses a bad body with 400 and a message that names the problem', async () => {
    const m = manualRun(ar4);
    const app = serve(m, runsDir);
    const post = (url: string, payload: unknown) => app.inject({ method: 'POST', url, headers: { ...bearer(TOKEN), 'content-type': 'application/json' }, payload: JSON.stringify(payload) });
    const missing = await post('/api/commands/acknowledge', {});
    expect(missing.statusCode).toBe(400);
    expect(missing.json<{ message: string }>().message).toBe("body must have required property 'alertId'");
    const badId = await post('/api/commands/acknowledge', { alertId: 'DROP TABLE' });
    expect(badId.statusCode).toBe(400);
    expect(badId.json<{ message: string }>().message).toMatch(/^body\/alertId must match pattern/);
    const extra = await post('/api/commands/hold', { force: true });
    expect(extra.statusCode).toBe(400);
    expect(extra.json<{ message: string }>().message).toBe('body has an unknown property "force"');
    const notJson = await app.inject({ method: 'POST', url: '/api/commands/hold', headers: { ...bearer(TOKEN), 'content-type': 'application/json' }, payload: '{hold' });
    expect(notJson.statusCode).toBe(400);
    expect(m.run.state.phase).toBe('depositing');
  });

  it('acknowledges an open alert by its id', async () => {
    const m = manualRun(ar4);
    m.run.runUntil(5);
    const app = serve(m, runsDir);
    const cut = (await app.inject({ method: 'POST', url: '/api/commands/cut-now', headers: bearer(TOKEN), payload: {} })).json<{ events: { type: string; id?: string }[] }>();
    const id = cut.events.find((e) => e.type === 'alert')?.id;
    expect(id).toMatch(/^A\d+$/);
    const ack = await app.inject({ method: 'POST', url: '/api/commands/acknowledge', headers: bearer(TOKEN), payload: { alertId: id } });
    expect(ack.statusCode).toBe(200);
    expect(m.run.state.openAlerts).not.toContain(id);
  });
});

describe('the viewer token', () => {
  it('is not needed on 127.0.0.1 without one; with one, viewing needs it (header or query) and health does not', async () => {
    const open = serve(manualRun(ar4), runsDir);
    expect((await open.inject({ method: 'GET', url: '/api/run' })).statusCode).toBe(200);

    const guarded = serve(manualRun(ar4), runsDir, { host: '0.0.0.0', viewerToken: VIEWER_TOKEN });
    expect((await guarded.inject({ method: 'GET', url: '/api/run' })).statusCode).toBe(401);
    expect((await guarded.inject({ method: 'GET', url: '/api/runs?viewer=wrong-viewer-token-000' })).statusCode).toBe(401);
    expect((await guarded.inject({ method: 'GET', url: '/api/runs', headers: { 'x-fringe-viewer': VIEWER_TOKEN } })).statusCode).toBe(200);
    expect((await guarded.inject({ method: 'GET', url: `/api/run?viewer=${VIEWER_TOKEN}` })).statusCode).toBe(200);
    expect((await guarded.inject({ method: 'GET', url: '/api/run', headers: bearer(TOKEN) })).statusCode).toBe(200);
    expect((await guarded.inject({ method: 'GET', url: '/api/health' })).statusCode).toBe(200);
    expect((await guarded.inject({ method: 'GET', url: '/' })).statusCode).toBe(200);
    // The viewer token does not open the controls.
    expect((await guarded.inject({ method: 'POST', url: '/api/commands/hold', headers: bearer(VIEWER_TOKEN), payload: {} })).statusCode).toBe(401);
  });

  it('refuses tokens too short to be secret', () => {
    expect(() => buildServer({ hub: manualRun(ar4).hub, runsDir }, { token: 'short', host: '127.0.0.1' })).toThrow(/token/);
  });
});

describe('the Host', () => {
  it('must name this server: any other is refused with 421 and one sentence, on every route and before any token', async () => {
    const m = manualRun(ar4);
    const app = serve(m, runsDir);
    for (const host of ['evil.example', 'evil.example:80', '[x', 'localhost.evil.example', '127.0.0.1.nip.example:80']) {
      for (const url of ['/api/health', '/api/runs', '/api/run/snapshot', `/api/runs/${recordedId}/journal`, '/', '/app.js', '/nowhere']) {
        const r = await app.inject({ method: 'GET', url, headers: { host } });
        expect(r.statusCode, `${host} ${url}`).toBe(421);
        expect(r.json<{ message: string }>().message).toMatch(/^this server answers only to its own address .*--allow-host[^.]*$/);
      }
    }
    // A command with the right token under a forged Host is refused, and does not reach the run.
    const forged = await app.inject({ method: 'POST', url: '/api/commands/hold', headers: { ...bearer(TOKEN), host: 'evil.example' }, payload: {} });
    expect(forged.statusCode).toBe(421);
    expect(m.run.state.phase).toBe('depositing');
    for (const host of ['localhost:80', '127.0.0.1:80', '[::1]:80', 'LocalHost:80']) expect((await app.inject({ method: 'GET', url: '/api/health', headers: { host } })).statusCode, host).toBe(200);
  });

  it('may be another name the server was given, or the bound host', async () => {
    const named = serve(manualRun(ar4), runsDir, { host: '0.0.0.0', viewerToken: VIEWER_TOKEN, allowedHosts: ['coater-pc', 'coater-pc.lab.example'] });
    expect((await named.inject({ method: 'GET', url: '/api/health', headers: { host: 'coater-pc:80' } })).statusCode).toBe(200);
    expect((await named.inject({ method: 'GET', url: '/api/health', headers: { host: 'coater-pc.lab.example' } })).statusCode).toBe(200);
    expect((await named.inject({ method: 'GET', url: '/api/health', headers: { host: 'printer.lab.example' } })).statusCode).toBe(421);
    const bound = serve(manualRun(ar4), runsDir, { host: 'coater-pc.lab.example', viewerToken: VIEWER_TOKEN });
    expect((await bound.inject({ method: 'GET', url: '/api/health', headers: { host: 'coater-pc.lab.example:80' } })).statusCode).toBe(200);
    expect(() => serve(manualRun(ar4), runsDir, { allowedHosts: ['coater pc'] })).toThrow('options.allowedHosts: "coater pc" is not a host name');
  });
});

describe('logs', () => {
  it('never carry the command token or the viewer token', async () => {
    const lines: string[] = [];
    const stream = new Writable({
      write(chunk: Buffer, _encoding, callback) {
        lines.push(chunk.toString('utf8'));
        callback();
      },
    });
    const m = manualRun(ar4);
    const app = serve(m, runsDir, { viewerToken: VIEWER_TOKEN, host: '0.0.0.0', logger: { level: 'trace', stream } });
    await app.inject({ method: 'POST', url: '/api/commands/hold', headers: bearer(TOKEN), payload: {} });
    await app.inject({ method: 'POST', url: '/api/commands/resume', headers: bearer(`${TOKEN}-wrong`), payload: {} });
    await app.inject({ method: 'POST', url: '/api/commands/acknowledge', headers: bearer(TOKEN), payload: { alertId: TOKEN } });
    await app.inject({ method: 'GET', url: `/api/run?viewer=${VIEWER_TOKEN}` });
    await app.inject({ method: 'GET', url: '/api/runs', headers: { 'x-fringe-viewer': VIEWER_TOKEN } });
    const text = lines.join('');
    // The requests were logged (so the check means something) …
    expect(text).toContain('/api/commands/hold');
    expect(text).toContain('operator command');
    expect(text).toContain('viewer=[redacted]');
    // … but no token ever was.
    expect(text).not.toContain(TOKEN);
    expect(text).not.toContain(VIEWER_TOKEN);
  });
});
