// `fringe demo` as a process: Ctrl-C while the simulated run is going aborts it as the operator's
// abort would (every shutter closed, journalled), stops the dashboard, exits, and says so.
import { spawn } from 'node:child_process';
import { mkdtempSync, readdirSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { readJournal } from '../../src/journal/journal-reader.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const ar4 = join(root, 'config/recipes/ar4-visible.yaml');
const cleanups: (() => void)[] = [];
afterAll(() => cleanups.forEach((c) => c()));

describe('fringe demo, interrupted', () => {
  it('aborts the run with its shutters closed, stops the dashboard, exits 0 and says exactly that', async () => {
    const runs = mkdtempSync(join(tmpdir(), 'fringe-demo-int-'));
    // At 1× the 4-layer run lasts minutes: it is still going when Ctrl-C comes.
    const child = spawn(process.execPath, [join(root, 'src/cli/fringe.js'), 'demo', '--recipe', ar4, '--speed', '1', '--port', '0', '--runs', runs], {
      cwd: root,
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    cleanups.push(() => child.kill('SIGKILL'));
    let out = '';
    let err = '';
    const exited = new Promise<number | null>((resolve) => child.once('exit', (code) => resolve(code)));
    const listening = new Promise<string>((resolve, reject) => {
      child.stdout.on('data', (d: Buffer) => {
        out += d.toString();
        const url = /dashboard: (http:\/\/\S+)/.exec(out)?.[1];
        // The last line printed once listening.
        if (url && out.includes('not a safety system')) resolve(url);
      });
      child.stderr.on('data', (d: Buffer) => (err += d.toString()));
      void exited.then(() => reject(new Error(`the demo ended before listening: ${out}${err}`)));
    });
    const url = await listening;
    expect((await fetch(`${url}api/health`)).status).toBe(200);
    child.kill('SIGINT');
    expect(await exited, err).toBe(0);

    expect(out).toMatch(/stopped: the simulated run was aborted after \d+ s of run time, its shutters closed \(kept in .+\); the dashboard has stopped\n$/);
    expect(out).not.toContain('stays up');
    expect(err).toBe('');
    await expect(fetch(`${url}api/health`)).rejects.toThrow();

    // The journal and the summary agree with the words.
    const dir = join(runs, readdirSync(runs)[0] as string);
    const events: RunEvent[] = readJournal(join(dir, 'journal.ndjson')).records.flatMap((r) => (r.k === 'e' ? [r.event] : []));
    const abortAt = events.findIndex((e) => e.type === 'alert' && e.code === 'operator-abort');
    expect(abortAt).toBeGreaterThan(-1);
    const closes = events.slice(abortAt).filter((e) => e.type === 'shutter' && e.command.action === 'close');
    expect(closes.map((e) => (e.type === 'shutter' ? e.command.source : '')).sort()).toEqual(['SiO2', 'TiO2']);
    expect(events.at(-1)).toMatchObject({ type: 'run-finished', outcome: 'aborted' });
    expect((JSON.parse(readFileSync(join(dir, 'summary.json'), 'utf8')) as { outcome: string }).outcome).toBe('aborted');
  });
});
