// `fringe demo` in its own process, mid-run, under a bounded batch of hostile requests over raw
// TCP on 127.0.0.1: malformed percent-encodings, absolute-form targets, bad and forged Hosts,
// huge headers, odd methods, broken bodies, upgrade requests to every path with bad input,
// connections reset right after asking (upgrades and plain requests), and paths and Hosts made up by fast-check. Afterwards
// the process must still be running with nothing on stderr, still answer /api/health and still
// open the live feed; no request may have been answered with a server error.
import { spawn, type ChildProcess } from 'node:child_process';
import { connect } from 'node:net';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { WebSocket } from 'ws';
import { tempDir } from '../server/support.ts';

const CLI = fileURLToPath(new URL('../../src/cli/fringe.js', import.meta.url));
const AR4 = fileURLToPath(new URL('../../config/recipes/ar4-visible.yaml', import.meta.url));

let child: ChildProcess;
let stderr = '';
let port = 0;
let token = '';

beforeAll(async () => {
  // Slow enough that the run is mid-layer, with a shutter open, through the whole batch.
  child = spawn(process.execPath, [CLI, 'demo', '--recipe', AR4, '--speed', '2', '--port', '0', '--runs', tempDir('hostile')], { stdio: ['ignore', 'pipe', 'pipe'] });
  child.stderr?.on('data', (chunk: Buffer) => (stderr += chunk.toString('utf8')));
  let stdout = '';
  await new Promise<void>((resolve, reject) => {
    child.once('exit', (code) => reject(new Error(`fringe demo exited (${code}) before listening: ${stderr}`)));
    child.stdout?.on('data', (chunk: Buffer) => {
      stdout += chunk.toString('utf8');
      const address = /dashboard: http:\/\/127\.0\.0\.1:(\d+)\//.exec(stdout);
      const printed = /command token [^\n]*: (\S+)\n/.exec(stdout);
      if (address && printed) {
        port = Number(address[1]);
        token = printed[1] as string;
        resolve();
      }
    });
  });
}, 60_000);

afterAll(async () => {
  if (!child || child.exitCode !== null || child.signalCode !== null) return;
  const exited = new Promise((resolve) => child.once('exit', resolve));
  child.kill('SIGINT');
  const timer = setTimeout(() => child.kill('SIGKILL'), 10_000);
  await exited;
  clearTimeout(timer);
});

/** Sends `request` as bytes and gives the status line of the answer ('' when the server closed without one). */
function exchange(request: string | Buffer, options: { reset?: boolean } = {}): Promise<string> {
  return new Promise((resolve) => {
    const socket = connect(port, '127.0.0.1');
    let answer = '';
    const finish = (): void => {
      clearTimeout(timer);
      socket.destroy();
      const end = answer.indexOf('\r\n');
      resolve(end < 0 ? answer.slice(0, 40) : answer.slice(0, end));
    };
    // A request the server is still waiting on (a promised body that never comes) is given up.
    const timer = setTimeout(finish, 10_000);
    socket.on('connect', () => {
      socket.write(request);
      if (options.reset) {
        socket.resetAndDestroy();
        finish();
      }
    });
    socket.on('data', (chunk: Buffer) => {
      answer += chunk.toString('latin1');
      if (answer.includes('\r\n')) finish();
    });
    socket.on('error', finish);
    socket.on('close', finish);
  });
}

/** Runs `tasks` a few at a time. */
async function inBatches<T>(tasks: (() => Promise<T>)[], width: number): Promise<T[]> {
  const results: T[] = [];
  for (let i = 0; i < tasks.length; i += width) results.push(...(await Promise.all(tasks.slice(i, i + width).map((task) => task()))));
  return results;
}

function hostileRequests(): { request: string | Buffer; reset?: boolean }[] {
  const host = `Host: 127.0.0.1:${port}\r\n`;
  const upgrade = 'Connection: Upgrade\r\nUpgrade: websocket\r\nSec-WebSocket-Version: 13\r\nSec-WebSocket-Key: dGhlIHNhbXBsZSBub25jZQ==\r\n';
  const get = (target: string, headers = host): string => `GET ${target} HTTP/1.1\r\n${headers}\r\n`;
  const up = (target: string, headers = host): string => `GET ${target} HTTP/1.1\r\n${headers}${upgrade}\r\n`;
  const post = (target: string, body: string, headers = ''): string =>
    `POST ${target} HTTP/1.1\r\n${host}Authorization: Bearer ${token}\r\nContent-Type: application/json\r\nContent-Length: ${Buffer.byteLength(body)}\r\n${headers}\r\n${body}`;
  const requests: { request: string | Buffer; reset?: boolean }[] = [];

  const malformed = ['/api/runs/%E0%A4%A', '/api/runs/%E0%A4%A/journal', '/api/runs/%/replay', '/%ff%fe', '/api/live?viewer=%E0%A4%A', '/api/runs?viewer=%%', '/vendor/uplot/%c0%af', '/api/runs/%00/journal'];
  const absolute = ['http://[x/api/live', 'http://evil.example/api/runs', `http://127.0.0.1:${port}/api/run`, 'https://[::1/', 'http:///api/live', '//api/live', '*', 'api/live', 'http://%/api/live'];
  for (const target of [...malformed, ...absolute]) requests.push({ request: get(target) }, { request: up(target) });

  const badHosts = ['Host: [x\r\n', 'Host: \r\n', 'Host: a:b:c\r\n', `Host: 127.0.0.1:99999\r\n`, `Host: ${'h'.repeat(8000)}\r\n`, `Host: evil.example\r\nHost: 127.0.0.1:${port}\r\n`];
  for (const h of badHosts) requests.push({ request: get('/api/runs', h) }, { request: up('/api/live', h) });
  requests.push({ request: Buffer.concat([Buffer.from('GET /api/live HTTP/1.1\r\nHost: '), Buffer.from([0xc3, 0xa9, 0xff, 0x00]), Buffer.from(`\r\n${upgrade}\r\n`)]) });
  requests.push({ request: 'GET /api/run HTTP/1.0\r\n\r\n' }, { request: `GET /api/live HTTP/1.0\r\n${upgrade}\r\n` });

  // Huge headers: one long one, very many, and both on an upgrade.
  requests.push({ request: get('/api/health', `${host}X-Pad: ${'a'.repeat(20_000)}\r\n`) });
  requests.push({ request: get('/api/health', `${host}${Array.from({ length: 400 }, (_, i) => `X-${i}: ${i}\r\n`).join('')}`) });
  requests.push({ request: up('/api/live', `${host}X-Pad: ${'a'.repeat(70_000)}\r\n`) });

  // Odd methods and request lines.
  for (const line of ['BREW /api/health HTTP/1.1', 'PROPFIND / HTTP/1.1', 'TRACE /api/run HTTP/1.1', `CONNECT 127.0.0.1:${port} HTTP/1.1`, 'OPTIONS * HTTP/1.1', 'DELETE /api/runs HTTP/1.1', 'get /api/health HTTP/1.1', 'GET\t/ HTTP/1.1', 'GET / HTTP/9.9', 'GET /api/health', '\x16\x03\x01\x02\x00\x01']) {
    requests.push({ request: `${line}\r\n${host}\r\n` });
  }

  // Broken bodies behind the right token (none a command the run could take).
  for (const body of ['{', '{"__proto__":{"x":1}}', '{"constructor":{"prototype":{"x":1}}}', '[]', '"hold"', `{"pad":"${'x'.repeat(20_000)}"}`, '{"alertId":{"$ne":null}}']) {
    requests.push({ request: post('/api/commands/hold', body) }, { request: post('/api/commands/acknowledge', body) });
  }
  requests.push({ request: `POST /api/commands/hold HTTP/1.1\r\n${host}Authorization: Bearer ${token}\r\nContent-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\nzz\r\n{}\r\n0\r\n\r\n` });
  requests.push({ request: `POST /api/commands/hold HTTP/1.1\r\n${host}Authorization: Bearer ${token}\r\nContent-Length: 2\r\nTransfer-Encoding: chunked\r\n\r\n{}` });
  requests.push({ request: `POST /api/commands/hold HTTP/1.1\r\n${host}Authorization: Bearer ${token}\r\nContent-Type: application/json\r\nContent-Length: -1\r\n\r\n{}` });
  requests.push({ request: `POST /api/commands/hold HTTP/1.1\r\n${host}Authorization: Bearer ${token}\r\nContent-Type: text/x-unknown\r\nContent-Length: 2\r\n\r\n{}` });

  // Upgrades to every path, each with bad input, and each asked then reset.
  const paths = ['/api/live', '/api/runs/no-such-run/replay', '/api/runs/%E0%A4%A/replay', '/api/runs/x/replay?speed=%E0', '/api/health', '/', '/nowhere', '/api/commands/hold'];
  const badUpgrades = [
    host, // otherwise well-formed
    `${host}Origin: [\r\n`,
    `${host}Origin: null\r\n`,
    `Host: [x\r\n`,
    `${host}Sec-WebSocket-Protocol: ,,,\r\n`,
    `${host}Sec-WebSocket-Extensions: permessage-deflate; client_max_window_bits=99\r\n`,
  ];
  for (const path of paths) {
    for (const headers of badUpgrades) requests.push({ request: up(`${path}${path.includes('?') ? '&' : '?'}viewer=%`, headers) });
    requests.push({ request: `GET ${path} HTTP/1.1\r\n${host}Connection: Upgrade\r\nUpgrade: websocket\r\nSec-WebSocket-Version: 99\r\n\r\n` });
    requests.push({ request: up(path), reset: true });
  }

  // Plain requests reset right after asking, one with its body half sent.
  requests.push({ request: get('/api/runs/%E0%A4%A'), reset: true }, { request: get('/api/run/snapshot'), reset: true });
  requests.push({ request: post('/api/commands/hold', '{"pad":"x"}').slice(0, -4), reset: true });

  // Made-up paths and Hosts, each sent as a plain request and as an upgrade.
  const piece = fc.constantFrom('api', 'runs', 'live', 'replay', 'journal', 'health', 'commands', 'hold', '%', '%E0%A4%A', '%ff', '%2F', '%00', '..', '[', ']', '?', '#', '&viewer=', 'speed=', '%%', '\\', ':', '@', 'é');
  const path = fc.array(piece, { maxLength: 8 }).map((pieces) => `/${pieces.join('/')}`);
  const hostValue = fc.oneof(fc.constant(`127.0.0.1:${port}`), fc.constant(`localhost:${port}`), fc.string({ unit: fc.constantFrom('[', ']', ':', '.', 'a', '1', '%', '@', '/', ' ', 'x'), maxLength: 20 }));
  for (const [made, madeHost] of fc.sample(fc.tuple(path, hostValue), { seed: 17, numRuns: 60 })) {
    requests.push({ request: get(made, `Host: ${madeHost}\r\n`) }, { request: up(made, `Host: ${madeHost}\r\n`) });
  }
  return requests;
}

describe('the dashboard server under hostile requests', () => {
  it('keeps serving, in the same process, with nothing thrown', async () => {
    const batch = hostileRequests();
    expect(batch.length).toBeGreaterThan(250);
    const answers = await inBatches(
      batch.map(({ request, reset }) => () => exchange(request, { reset: reset ?? false })),
      8,
    );
    // The process is still the same one, still running, and said nothing on stderr …
    expect(stderr).toBe('');
    expect(child.exitCode).toBeNull();
    expect(child.signalCode).toBeNull();
    // … the batch reached it and was refused in the ways it should be, never with a server error …
    const codes = answers.map((a) => /^HTTP\/1\.1 (\d{3})/.exec(a)?.[1]).filter((c): c is string => c !== undefined);
    expect(codes.length).toBeGreaterThan(batch.length / 2);
    for (const expected of ['400', '404', '421', '431']) expect(codes).toContain(expected);
    expect(codes.filter((c) => c.startsWith('5'))).toEqual([]);
    // … and it still answers.
    const health = await fetch(`http://127.0.0.1:${port}/api/health`);
    expect(health.status).toBe(200);
    expect(((await health.json()) as { ok: boolean; run: { running: boolean } }).run.running).toBe(true);
    const feed = new WebSocket(`ws://127.0.0.1:${port}/api/live`);
    const first = await new Promise<{ type: string }>((resolve, reject) => {
      feed.once('message', (data: Buffer) => resolve(JSON.parse(data.toString('utf8')) as { type: string }));
      feed.once('error', reject);
    });
    feed.close();
    expect(first.type).toBe('snapshot');
  }, 120_000);
});
