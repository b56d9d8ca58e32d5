// What a client can send the server: random bodies of every content type to the command routes
// (with the token, so the body is read), and random frames to the live feed (text, binary, over
// the 1 KiB limit, and bytes that are no WebSocket frame at all). Never a server error, every
// refusal one JSON sentence, and the feed keeps feeding its viewers throughout; and random run ids
// and query strings to the viewing routes, none of which reaches past the runs folder.
import { mkdirSync, writeFileSync } from 'node:fs';
import type { AddressInfo } from 'node:net';
import { join } from 'node:path';
import fc from 'fast-check';
import type { FastifyInstance } from 'fastify';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { WebSocket } from 'ws';
import { buildServer } from '../../src/server/build-server.ts';
import { COMMAND_ACTIONS } from '../../src/server/plugins/commands.ts';
import { ar4, manualRun, tempDir, TOKEN, type ManualRun } from '../server/support.ts';
import { fuzzAsync, FUZZ_TIMEOUT_MS } from './fuzz-runs.ts';

const contentType = fc.oneof(
  fc.constantFrom(
    'application/json',
    'application/json; charset=utf-8',
    'application/json; charset=latin1',
    'APPLICATION/JSON',
    'text/plain',
    'text/plain; charset=utf-8',
    'application/x-www-form-urlencoded',
    'multipart/form-data; boundary=x',
    'application/octet-stream',
    'application/xml',
    '',
    ';',
    'application/json;;;',
  ),
  fc.string({ maxLength: 30 }),
);

const body = fc.oneof(
  fc.json({ maxDepth: 3 }),
  fc.jsonValue({ maxDepth: 3 }).map((v) => JSON.stringify(v)),
  fc.record({ alertId: fc.oneof(fc.string({ maxLength: 40 }), fc.jsonValue({ maxDepth: 2 })) }, { requiredKeys: [] }).map((v) => JSON.stringify(v)),
  fc.constantFrom('{}', '', '{', '}', 'null', '[]', '"hold"', '{"__proto__":{"polluted":1}}', '{"constructor":{"prototype":{"polluted":1}}}', '\uFEFF{}', '{"alertId":"A1","alertId":"A2"}'),
  fc.string({ maxLength: 200 }),
  fc.uint8Array({ maxLength: 200 }).map((bytes) => Buffer.from(bytes)),
  fc.integer({ min: 16 * 1024 - 8, max: 40 * 1024 }).map((n) => `{"alertId":"${'x'.repeat(n)}"}`),
);

const route = fc.oneof(
  { weight: 8, arbitrary: fc.constantFrom(...COMMAND_ACTIONS).map((a) => `/api/commands/${a}`) },
  { weight: 1, arbitrary: fc.constantFrom('/api/commands', '/api/commands/', '/api/commands/launch', '/api/commands/hold/', '/api/commands/%68old', '/api/commands/hold?x=1', '/api/run', '/api/health') },
);

const method = fc.oneof({ weight: 8, arbitrary: fc.constant('POST' as const) }, { weight: 1, arbitrary: fc.constantFrom('GET' as const, 'PUT' as const, 'DELETE' as const, 'PATCH' as const) });

/** A response is an answer, never a server error; a refusal is one JSON sentence. */
function expectOneSentence(statusCode: number, contentTypeHeader: string | undefined, text: string): void {
  expect(statusCode, text).toBeLessThan(500);
  if (statusCode < 400) return;
  expect(contentTypeHeader ?? '').toMatch(/^application\/json/);
  const parsed = JSON.parse(text) as { message?: unknown; statusCode?: unknown };
  expect(parsed.statusCode).toBe(statusCode);
  expect(typeof parsed.message).toBe('string');
  const message = parsed.message as string;
  expect(message.trim(), text).not.toBe('');
  expect(message, 'one line').not.toMatch(/\n/);
  expect(message.length, message).toBeLessThan(400);
  // A sentence, not a trace.
  expect(message).not.toMatch(/\n\s+at |node_modules|\.ts:\d+/);
}

describe('the command routes, random bodies', () => {
  let m: ManualRun;
  let app: FastifyInstance;
  beforeAll(() => {
    m = manualRun(ar4);
    m.run.runUntil(20);
    app = buildServer({ hub: m.hub, runsDir: tempDir('fuzz-rest') }, { token: TOKEN, host: '127.0.0.1' });
  });
  afterAll(() => app.close());

  it('never answers with a server error, and refuses in one JSON sentence', async () => {
    await fuzzAsync(
      'REST command bodies',
      fc.asyncProperty(method, route, contentType, fc.option(body, { nil: undefined }), async (verb, url, type, payload) => {
        const headers: Record<string, string> = { authorization: `Bearer ${TOKEN}` };
        if (type !== '') headers['content-type'] = type;
        const response = await app.inject({ method: verb, url, headers, ...(payload === undefined || verb === 'GET' ? {} : { payload }) });
        expectOneSentence(response.statusCode, response.headers['content-type'] as string | undefined, response.body);
        // Nothing a body says reaches a prototype.
        expect(({} as Record<string, unknown>).polluted).toBeUndefined();
      }),
    );
    expect((await app.inject({ method: 'GET', url: '/api/health' })).statusCode).toBe(200);
  }, FUZZ_TIMEOUT_MS);
});

describe('the live feed, random frames', () => {
  let m: ManualRun;
  let app: FastifyInstance;
  let url: string;
  beforeAll(async () => {
    m = manualRun(ar4);
    app = buildServer({ hub: m.hub, runsDir: tempDir('fuzz-ws') }, { token: TOKEN, host: '127.0.0.1', live: { flushMs: 5 } });
    await app.listen({ port: 0, host: '127.0.0.1' });
    url = `ws://127.0.0.1:${(app.server.address() as AddressInfo).port}/api/live`;
  });
  afterAll(() => app.close());

  const open = (): Promise<WebSocket> =>
    new Promise((resolve, reject) => {
      const socket = new WebSocket(url);
      socket.once('open', () => resolve(socket));
      socket.once('error', reject);
    });

  /** Resolves once the server has read everything sent before (it answers pings in order), or the socket closed. */
  const drained = (socket: WebSocket): Promise<void> =>
    new Promise((resolve) => {
      if (socket.readyState !== WebSocket.OPEN) return resolve();
      const done = (): void => {
        socket.off('pong', done);
        socket.off('close', done);
        resolve();
      };
      socket.on('pong', done);
      socket.on('close', done);
      socket.ping();
    });

  const frame = fc.oneof(
    fc.string({ maxLength: 200 }).map((text) => ({ kind: 'text' as const, data: text })),
    fc.jsonValue({ maxDepth: 3 }).map((v) => ({ kind: 'text' as const, data: JSON.stringify(v) })),
    fc.constantFrom('{"type":"command","action":"abort"}', '{"type":"subscribe"}', 'close', '\u0000').map((data) => ({ kind: 'text' as const, data })),
    fc.uint8Array({ maxLength: 200 }).map((bytes) => ({ kind: 'binary' as const, data: Buffer.from(bytes) })),
    fc.integer({ min: 1025, max: 64 * 1024 }).map((n) => ({ kind: 'oversized' as const, data: Buffer.alloc(n, 0x61) })),
    fc.uint8Array({ minLength: 1, maxLength: 64 }).map((bytes) => ({ kind: 'raw' as const, data: Buffer.from(bytes) })),
  );

  it('ignores or closes on whatever a client sends, and keeps feeding its viewers', async () => {
    const watcher = await open();
    let fed = 0;
    watcher.on('message', () => fed++);
    let client = await open();
    let closed = 0;
    let cases = 0;
    await fuzzAsync(
      'WebSocket frames',
      fc.asyncProperty(frame, async (f) => {
        if (client.readyState !== WebSocket.OPEN) {
          closed++;
          client = await open();
        }
        if (f.kind === 'raw') {
          // Bytes straight onto the connection, no frame the protocol knows (or half of one), and gone.
          (client as unknown as { _socket: { write(data: Buffer): void } })._socket.write(f.data);
          client.terminate();
        } else {
          client.send(f.data, { binary: f.kind !== 'text' });
          await drained(client);
        }
        // Every so often: the run moves on and the viewer that sent nothing hears of it.
        if (++cases % 200 === 0) {
          const before = fed;
          m.run.runUntil(m.run.nowS + 1);
          await new Promise<void>((resolve) => {
            const check = (): void => {
              if (fed > before) {
                watcher.off('message', check);
                resolve();
              }
            };
            watcher.on('message', check);
            check();
          });
        }
      }),
    );
    expect(watcher.readyState).toBe(WebSocket.OPEN);
    const before = fed;
    m.run.runUntil(m.run.nowS + 1);
    await expect.poll(() => fed, { timeout: 30_000 }).toBeGreaterThan(before);
    console.log(`fuzz WebSocket frames: the server closed ${closed} fuzzing connections (oversized or malformed frames)`);
    watcher.terminate();
    client.terminate();
    expect((await app.inject({ method: 'GET', url: '/api/health' })).statusCode).toBe(200);
  }, FUZZ_TIMEOUT_MS);
});

describe('the viewing routes, random run ids and query strings', () => {
  let m: ManualRun;
  let app: FastifyInstance;
  const RUN = 'run-1';
  beforeAll(() => {
    m = manualRun(ar4);
    const runsDir = tempDir('fuzz-view');
    mkdirSync(join(runsDir, RUN));
    writeFileSync(join(runsDir, RUN, 'journal.ndjson'), `${JSON.stringify({ journal: 'fringe', version: 1, runId: RUN, startedAt: '2026-01-01T00:00:00Z', recipe: 'r', meta: {} })}\n`);
    // A secret beside the runs folder that no id may reach.
    writeFileSync(join(runsDir, '..', 'secret.txt'), 'SECRET-BESIDE-THE-RUNS');
    app = buildServer({ hub: m.hub, runsDir }, { token: TOKEN, host: '127.0.0.1' });
  });
  afterAll(() => app.close());

  const piece = fc.oneof(
    fc.constantFrom(RUN, '..', '.', '%2e%2e', '%252e%252e', '..%2f', '%2f', '%5c', '..\\', '%00', '%', '%zz', '~', 'secret.txt', '%2e%2e%2fsecret.txt', 'journal.ndjson', '\u00e9', '%C3%A9', '%FF'),
    fc.string({ maxLength: 20 }).map(encodeURIComponent),
    fc.string({ maxLength: 20 }).filter((s) => !/[?#]/.test(s)),
  );
  const id = fc
    .array(fc.tuple(fc.constantFrom('', '/', '%2F'), piece), { minLength: 1, maxLength: 4 })
    .map((parts) => parts.map(([separator, text], i) => (i === 0 ? text : separator + text)).join(''));
  const query = fc.oneof(
    fc.constant(''),
    fc.constantFrom('?viewer=x', '?viewer=', '?viewer', '?viewer=a&viewer=b', '?other=1', '?%zz=1', `?viewer=${'v'.repeat(300)}`, '?speed=-1', '?speed=Infinity'),
    fc.string({ maxLength: 40 }).map((s) => `?${s}`),
  );
  const target = fc.oneof(
    fc.tuple(id, query).map(([i, q]) => `/api/runs/${i}${q}`),
    fc.tuple(id, query).map(([i, q]) => `/api/runs/${i}/journal${q}`),
    query.map((q) => `/api/run${q}`),
    query.map((q) => `/api/runs${q}`),
    query.map((q) => `/api/run/snapshot${q}`),
  );

  it('never answers with a server error, refuses in one JSON sentence, and serves only the run there is', async () => {
    await fuzzAsync(
      'REST viewing routes',
      fc.asyncProperty(target, async (url) => {
        let response;
        try {
          response = await app.inject({ method: 'GET', url });
        } catch (error) {
          // A target light-my-request cannot even form is no request the server saw.
          if (error instanceof TypeError || error instanceof URIError) return;
          throw error;
        }
        expectOneSentence(response.statusCode, response.headers['content-type'] as string | undefined, response.body);
        expect(response.body).not.toContain('SECRET-BESIDE-THE-RUNS');
        if (response.statusCode === 200 && url.startsWith('/api/runs/')) expect(response.body).toContain(RUN);
      }),
    );
  }, FUZZ_TIMEOUT_MS);
});
