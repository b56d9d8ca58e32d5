// The spectral channel end to end: the virtual chamber with its spectrometer served over TCP (and
// over a pseudo-terminal, with Debian's socat), `fringe run` reading spectra beside the optical and
// crystal lines on one port, every spectrum framed and journalled, and the run replayed exactly.
import { spawn, spawnSync, type ChildProcess } from 'node:child_process';
import { mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { createPtyPair, loadSimProfile, serveOnPty, serveOnTcp } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { createInputReader } from '../../src/journal/journal-format.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import type { SpectrumReading } from '../../src/pipeline/types.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const recipeFile = join(root, 'config/recipes/ar4-visible.yaml');
const recipe = loadRecipe(recipeFile);
const profile = loadSimProfile(join(root, 'config/sim/spectral.yaml'));
const haveSocat = spawnSync('socat', ['-V'], { stdio: 'ignore' }).status === 0;
if (!haveSocat && process.env.CI === 'true') throw new Error('socat is missing under CI: .ci/run must install the Debian package socat');
if (!haveSocat) console.warn('skipping the spectral run over a pseudo-terminal: the Debian package socat is not installed');

const children: ChildProcess[] = [];
afterAll(() => {
  for (const c of children) c.kill('SIGKILL');
});

function fringe(args: string[]): { out: () => string; done: Promise<number | null> } {
  const child = spawn(process.execPath, [join(root, 'src/cli/fringe.js'), ...args], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'] });
  children.push(child);
  let out = '';
  child.stdout?.on('data', (d: Buffer) => (out += d.toString()));
  child.stderr?.on('data', (d: Buffer) => (out += d.toString()));
  return { out: () => out, done: new Promise((resolve) => child.once('exit', (code) => resolve(code))) };
}

/** The shipped spectral chamber file (config/chambers/sim-tcp-spectral.yaml) on this test's own port. */
function chamberFile(dir: string, transport: string): string {
  const file = join(dir, 'chamber.yaml');
  writeFileSync(
    file,
    `formatVersion: 1
name: spectral test chamber
instruments:
  - id: monitor
    transport: ${transport}
    channels: [optical, crystal, spectral]
    spectrum: { form: table, headerTag: SPW, rowTag: SPC, timeField: true }
shutters:
  transport: monitor
  ack: { timeoutMs: 1000 }
`,
  );
  return file;
}

async function waitFor(predicate: () => boolean, what: string, timeoutMs = 60_000): Promise<void> {
  for (const start = Date.now(); !predicate(); ) {
    if (Date.now() - start > timeoutMs) throw new Error(`timed out waiting for ${what}`);
    await new Promise((r) => setTimeout(r, 50));
  }
}

/**
 * Runs the AR recipe live on `transport` (`serve` starts the chamber once the run's port is open:
 * a pseudo-terminal keeps what nobody reads, and a chamber started seconds earlier would leave a
 * backlog of its spectra), then checks the journal's spectra and replays it.
 */
async function runAndCheck(dir: string, transport: string, serve: () => Promise<unknown> = () => Promise.resolve()): Promise<void> {
  const runs = join(dir, 'runs');
  const run = fringe(['run', '--chamber', chamberFile(dir, transport), '--clock', 'instrument', '--runs', runs, recipeFile]);
  await waitFor(() => /monitor: connected/.test(run.out()), 'the run to open its port');
  await serve();
  expect(await run.done, run.out()).toBe(0);
  const runDir = join(runs, readdirSync(runs)[0] as string);
  const journal = readJournal(join(runDir, 'journal.ndjson'));
  expect(journal.damagedLines).toBe(0);
  expect(journal.records.filter((r) => r.k === 'e' && r.event.type === 'cut')).toHaveLength(4);
  // No line lost to framing or decoding, and no spectrum refused, from the start on (before it the
  // host's clock may run ahead of a chamber started after it). Readings refused for their time
  // (time-backwards, time-jump) are the run clock's ticks under a loaded machine, not this path's.
  const startS = journal.records.flatMap((r) => (r.k === 'e' && r.event.type === 'run-started' ? [r.event.timeS] : []))[0] ?? 0;
  const lineFaults = new Set(['fault-line-too-long', 'fault-garbled', 'fault-unknown-channel', 'fault-not-a-number', 'fault-out-of-range']);
  const faults = journal.records.flatMap((r) =>
    r.k === 'e' && r.event.type === 'alert' && r.event.timeS >= startS && (lineFaults.has(r.event.code) || /^fault-(spectrum|grid)-/.test(r.event.code)) ? [r.event.message] : [],
  );
  expect(faults).toEqual([]);
  // Every spectrum from the run's start to its end, 0.2 s apart, none lost, each on the 251-wavelength grid.
  const read = createInputReader();
  const spectra = journal.records.map(read).filter((x): x is SpectrumReading => x?.kind === 'spectrum');
  const readings = journal.records.flatMap((r) => (r.k === 'r' ? [r.t] : []));
  const runS = Math.max(...readings) - Math.min(...readings);
  expect(spectra.length).toBeGreaterThan(runS * 5 * 0.98);
  const grid = spectra[0]?.wavelengthsNm as Float64Array;
  expect([grid.length, grid[0], grid[250]]).toEqual([251, 400, 900]);
  for (let i = 0; i < spectra.length; i++) {
    const s = spectra[i] as SpectrumReading;
    expect(s.wavelengthsNm).toBe(grid);
    expect(s.values).toHaveLength(251);
    if (i > 0) expect(s.timeS - (spectra[i - 1] as SpectrumReading).timeS).toBeCloseTo(0.2, 3);
  }
  // The chip's transmittance, seen through the spectrometer (0.2 % noise): a fraction near 0..1.
  const mean = spectra.reduce((acc, s) => acc + s.values.reduce((a, v) => a + v, 0) / s.values.length, 0) / spectra.length;
  expect(mean).toBeGreaterThan(0.5);
  expect(mean).toBeLessThan(1.01);
  // Replayed with the spectra among the inputs, every decision comes out as recorded.
  const replay = fringe(['replay', runDir, '--json']);
  expect(await replay.done, replay.out()).toBe(0);
  const result = JSON.parse(replay.out()) as { differing: number; layers: unknown[] };
  expect(result.layers).toHaveLength(4);
  expect(result.differing).toBe(0);
}

describe('the spectral channel end to end', () => {
  it('over TCP: spectra arrive framed beside the other lines, are journalled, and replay', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-spectral-tcp-'));
    const served = await serveOnTcp({ recipe, profile, seed: 4, speed: 20, port: 0 });
    try {
      await runAndCheck(dir, `{ kind: tcp, host: 127.0.0.1, port: ${served.port} }`);
    } finally {
      await served.close();
    }
  }, 300_000);

  it.runIf(haveSocat)('over a pseudo-terminal: the same through the serial path', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-spectral-pty-'));
    const pair = await createPtyPair(join(dir, 'port'));
    let served: Awaited<ReturnType<typeof serveOnPty>> | undefined;
    try {
      await runAndCheck(dir, `{ kind: serial, path: ${pair.hostPath}, baudRate: 115200 }`, async () => {
        served = await serveOnPty(pair, { recipe, profile, seed: 6, speed: 10 });
      });
    } finally {
      await served?.close();
      pair.close();
    }
  }, 300_000);
});
