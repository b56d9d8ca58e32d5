// fringe whatif end to end on a simulated run (seeded): the what-if of the recipe the run used
// reproduces the run's per-layer errors within their spread, a changed shutter delay moves them
// the way the physics says, and every bad input is refused in one sentence.
import { copyFileSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { beforeAll, describe, expect, it } from 'vitest';
import { runCli } from '../support/run-cli.ts';

const RECIPE = fileURLToPath(new URL('../../config/recipes/ar4-visible.yaml', import.meta.url));
const DESIGN = fileURLToPath(new URL('../../config/designs/ar4-visible.yaml', import.meta.url));
const OTHER_RECIPE = fileURLToPath(new URL('../../config/recipes/edge-longpass-visible.yaml', import.meta.url));
const PROFILE = fileURLToPath(new URL('../../config/sim/uncalibrated.yaml', import.meta.url));

interface Report {
  run: string;
  strategy: string;
  runs: number;
  layers: { number: number; material: string; recorded: { opticalErrorPercent: number; sigmaPercent: number }; whatIf: { meanPercent: number; rmsPercent: number; sdPercent: number } }[];
  spectrum: { recorded: { maxAbsT: number; meetsTolerances: boolean | null }; whatIf: { meanMaxAbsT: number; yieldPercent: number | null } } | null;
}

describe('fringe whatif', () => {
  let dir = '';
  let run = '';
  let same: Report;
  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'fringe-whatif-'));
    const measured = join(dir, 'part.csv');
    const sim = await runCli('simulate', RECIPE, '--profile', PROFILE, '--seed', '3', '--journal', join(dir, 'runs'), '--measured-out', measured);
    expect(sim.code).toBe(0);
    run = join(dir, 'runs', readdirSync(join(dir, 'runs'))[0] as string);
    expect((await runCli('calibrate', run, '--measured', measured)).code).toBe(0);
    const r = await runCli('whatif', run, '--recipe', RECIPE, '--runs', '6', '--seed', '40', '--json', '--workers', '2');
    expect(r.code).toBe(0);
    same = JSON.parse(r.out) as Report;
  }, 300_000);

  it('the same recipe on the calibrated chamber reproduces the recorded run per layer, within the spread', () => {
    expect(same.strategy).toBe('fit'); // as the run was cut
    expect(same.runs).toBe(6);
    expect(same.layers.map((l) => l.number)).toEqual([1, 2, 3, 4]);
    for (const l of same.layers) {
      // The run's own errors are a few per cent (the uncalibrated chamber); the what-if's mean
      // must sit on them within three of the combined spread (runs' sd, calibration's sigma).
      const spread = Math.hypot(l.whatIf.sdPercent, l.recorded.sigmaPercent);
      expect(Math.abs(l.recorded.opticalErrorPercent - l.whatIf.meanPercent)).toBeLessThan(3 * spread);
      expect(l.whatIf.rmsPercent).toBeGreaterThanOrEqual(Math.abs(l.whatIf.meanPercent));
    }
    expect(same.spectrum?.recorded.meetsTolerances).not.toBeNull();
    expect(same.spectrum?.whatIf.yieldPercent).not.toBeNull();
  });

  it('a recipe that expects a longer shutter delay than the chamber has cuts every layer thinner, by rate × the difference', async () => {
    // The controller allows 2 s for the shutter, which really moves in ~0.2 s (the profile's
    // delay as the acknowledgements showed it): each layer stops ~1.8 s × 0.4 nm/s early.
    const recipe = join(dir, 'late-shutter.yaml');
    writeFileSync(recipe, readFileSync(RECIPE, 'utf8').replace('../designs/ar4-visible.yaml', DESIGN).replace('  cut: auto', '  cut: auto\n  shutterDelayS: 2'));
    const r = await runCli('whatif', run, '--recipe', recipe, '--runs', '6', '--seed', '40', '--json', '--workers', '2');
    expect(r.code).toBe(0);
    const changed = JSON.parse(r.out) as Report;
    const targetsNm = [12.11, 34.64, 112.24, 86.73]; // the design's layers (calibrate's table)
    changed.layers.forEach((l, i) => {
      const shift = l.whatIf.meanPercent - (same.layers[i]?.whatIf.meanPercent ?? Number.NaN);
      const expected = (-100 * 1.8 * 0.4) / (targetsNm[i] as number); // derived: rate × delay difference over the target
      expect(shift).toBeLessThan(0.5 * expected);
      expect(shift).toBeGreaterThan(2 * expected);
    });
  }, 300_000);

  it('draws the recorded spectrum, the what-if band and the design', async () => {
    const plot = join(dir, 'whatif.svg');
    const r = await runCli('whatif', run, '--recipe', RECIPE, '--runs', '2', '--workers', '1', '--plot', plot);
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/recorded ± sigma +what-if mean/);
    expect(r.out).toMatch(/final spectrum against the design/);
    expect(readFileSync(plot, 'utf8')).toMatch(/<svg[\s\S]*design[\s\S]*recorded run \(calibrated\)[\s\S]*what-if: lowest T of 2[\s\S]*what-if: highest T of 2/);
  }, 300_000);

  it('refuses in one sentence: no such run, no calibration, another design, runs out of range, no recipe', async () => {
    const uncalibrated = join(dir, 'uncalibrated-run');
    mkdirSync(uncalibrated);
    copyFileSync(join(run, 'journal.ndjson'), join(uncalibrated, 'journal.ndjson'));
    copyFileSync(join(run, 'recipe.json'), join(uncalibrated, 'recipe.json'));
    const old = join(dir, 'old-calibration');
    mkdirSync(old);
    copyFileSync(join(run, 'journal.ndjson'), join(old, 'journal.ndjson'));
    copyFileSync(join(run, 'recipe.json'), join(old, 'recipe.json'));
    const calibration = JSON.parse(readFileSync(join(run, 'calibration.json'), 'utf8')) as Record<string, unknown>;
    delete calibration.profile;
    writeFileSync(join(old, 'calibration.json'), JSON.stringify(calibration));
    const outside = join(dir, 'outside-calibration');
    mkdirSync(outside);
    copyFileSync(join(run, 'journal.ndjson'), join(outside, 'journal.ndjson'));
    copyFileSync(join(run, 'recipe.json'), join(outside, 'recipe.json'));
    writeFileSync(join(outside, 'calibration.json'), JSON.stringify({ ...calibration, profileProblem: 'the calibrated chamber lies outside what the virtual chamber models (x), so no simulator profile was made' }));
    const cases: [string[], RegExp][] = [
      [[outside, '--recipe', RECIPE], /calibration\.json: the calibrated chamber lies outside what the virtual chamber models/],
      [[join(dir, 'no-such-run'), '--recipe', RECIPE], /no run at .*no-such-run: give a run folder/],
      [[uncalibrated, '--recipe', RECIPE], /has no calibration beside it \(calibration\.json\): run `fringe calibrate .*` first/],
      [[old, '--recipe', RECIPE], /written before calibrations kept the chamber's profile: run `fringe calibrate/],
      [[run, '--recipe', OTHER_RECIPE], /is for another design|has \d+ layers and the recorded run's design 4/],
      [[run, '--recipe', RECIPE, '--runs', '0'], /--runs must be a whole number from 1 to 10000, got 0/],
      [[run, '--recipe', RECIPE, '--runs', '20000'], /--runs must be a whole number from 1 to 10000, got 20000/],
      [[run, '--recipe', RECIPE, '--runs', 'many'], /--runs expects a number, got "many"/],
      [[run], /needs --recipe FILE/],
      [[], /needs exactly one RUN/],
      [[run, '--recipe', RECIPE, '--estimator', 'guess'], /--estimator must be fit or plain/],
      [[run, '--recipe', join(dir, 'missing.yaml')], /missing\.yaml/],
    ];
    for (const [args, pattern] of cases) {
      const r = await runCli('whatif', ...args);
      expect(r.code, args.join(' ')).not.toBe(0);
      expect(r.err).toMatch(pattern);
      expect(r.err.trim().split('\n'), r.err).toHaveLength(1);
    }
  }, 120_000);
});
