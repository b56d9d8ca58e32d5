// The demo keeps only its last few runs in the runs folder; a run that is not the demo's is never removed.
import { existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, symlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import type { CommandIo } from '../../src/cli/command-io.ts';
import { runDemo } from '../../src/cli/commands/demo.ts';
import { pruneDemoRuns } from '../../src/cli/demo-runs.ts';

const AR4 = fileURLToPath(new URL('../../config/recipes/ar4-visible.yaml', import.meta.url));

/** A run folder with a journal header (and one reading), as fringe writes them. */
function addRun(runsDir: string, id: string, startedAt: string, meta: Record<string, unknown>, header?: string): void {
  mkdirSync(join(runsDir, id));
  const line = header ?? JSON.stringify({ journal: 'fringe', version: 1, runId: id, startedAt, recipe: 'r', meta });
  writeFileSync(join(runsDir, id, 'journal.ndjson'), `${line}\n{"k":"r","c":"o","t":0,"v":0.5,"a":0}\n`);
}

/** Six demo runs (d1 oldest … d6 newest) among runs that are not the demo's, older and newer. */
function runsFolder(): string {
  const runsDir = mkdtempSync(join(tmpdir(), 'fringe-demo-runs-'));
  for (let i = 1; i <= 6; i++) addRun(runsDir, `d${i}`, `2026-01-0${i}T00:00:00.000Z`, { source: 'simulator', demo: true });
  addRun(runsDir, 'live-old', '2025-01-01T00:00:00.000Z', { source: 'live' });
  addRun(runsDir, 'live-new', '2026-02-01T00:00:00.000Z', { source: 'live' });
  addRun(runsDir, 'simulated', '2025-06-01T00:00:00.000Z', { source: 'simulator', seed: 1 });
  // Looks like the demo's in every way but its marker's type.
  addRun(runsDir, 'almost', '2025-01-02T00:00:00.000Z', { source: 'simulator', demo: 'true' });
  // A header that cannot be read: not known to be the demo's.
  addRun(runsDir, 'damaged', '2025-01-03T00:00:00.000Z', {}, '{"journal":"fringe","version":1,"runId":"damaged","meta":{"demo":true}');
  // A demo run outside the folder, linked in: not this folder's to remove.
  const outside = mkdtempSync(join(tmpdir(), 'fringe-demo-outside-'));
  addRun(outside, 'elsewhere', '2024-01-01T00:00:00.000Z', { source: 'simulator', demo: true });
  symlinkSync(join(outside, 'elsewhere'), join(runsDir, 'linked'));
  return runsDir;
}

const others = ['almost', 'damaged', 'linked', 'live-new', 'live-old', 'simulated'];

describe('pruning the demo runs', () => {
  it('removes the oldest demo runs down to the number kept, and nothing else', () => {
    const runsDir = runsFolder();
    expect(pruneDemoRuns(runsDir, 4).sort()).toEqual(['d1', 'd2']);
    expect(readdirSync(runsDir).sort()).toEqual([...others, 'd3', 'd4', 'd5', 'd6'].sort());
    expect(pruneDemoRuns(runsDir, 4)).toEqual([]);
    expect(pruneDemoRuns(runsDir, 0).sort()).toEqual(['d3', 'd4', 'd5', 'd6']);
    // However many are removed, every run that is not the demo's stays, its journal whole.
    expect(readdirSync(runsDir).sort()).toEqual(others);
    expect(readFileSync(join(runsDir, 'live-old', 'journal.ndjson'), 'utf8')).toContain('"source":"live"');
    expect(existsSync(join(runsDir, 'linked', 'journal.ndjson'))).toBe(true);
  });

  it('a missing runs folder has nothing to prune', () => {
    expect(pruneDemoRuns(join(tmpdir(), 'fringe-no-such-runs-folder'), 1)).toEqual([]);
  });

  it('fringe demo marks its run as the demo\'s and keeps its last N, real runs untouched', async () => {
    const runsDir = runsFolder();
    const out: string[] = [];
    const io: CommandIo = { out: (t) => out.push(t), err: () => undefined };
    const stop = new AbortController();
    let listening = false;
    const exit = runDemo(['--recipe', AR4, '--speed', '5000', '--port', '0', '--runs', runsDir, '--keep-demo-runs', '3'], io, {
      signal: stop.signal,
      onListening: () => {
        listening = true;
      },
    });
    for (let i = 0; i < 200 && !listening; i++) await new Promise((r) => setTimeout(r, 20));
    expect(listening).toBe(true);
    stop.abort();
    expect(await exit).toBe(0);
    const left = readdirSync(runsDir).sort();
    const fresh = left.filter((id) => !others.includes(id) && !/^d\d$/.test(id));
    expect(fresh).toHaveLength(1);
    expect(left).toEqual([...others, 'd5', 'd6', ...fresh].sort());
    const header = JSON.parse(readFileSync(join(runsDir, fresh[0] as string, 'journal.ndjson'), 'utf8').split('\n')[0] as string) as { meta: Record<string, unknown> };
    expect(header.meta).toMatchObject({ demo: true, source: 'simulator' });
    expect(out.join('\n')).toContain(`removed 4 older demo runs from ${runsDir} (the demo keeps its last 3; other runs are never removed)`);
  });

  it('refuses a --keep-demo-runs that is not a whole number from 1', async () => {
    for (const value of ['0', '-2', '2.5', 'many']) {
      const err: string[] = [];
      const code = await runDemo(['--keep-demo-runs', value], { out: () => undefined, err: (t) => err.push(t) }).catch((e: Error) => e.message);
      expect(String(code)).toMatch(/--keep-demo-runs (must be a whole number from 1 to 10000|expects a number)/);
    }
  });
});
