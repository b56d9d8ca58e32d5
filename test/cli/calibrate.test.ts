// fringe calibrate and simulate --measured-out on the command line: the files they write and
// read, the JSON's keys, and every refusal as one sentence.
import { copyFileSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadSimProfile, SimProfileSchema } from '../../sim/index.ts';
import { parseMeasuredSpectrum } from '../../src/calibrate/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { runCli } from '../support/run-cli.ts';

const RECIPE = fileURLToPath(new URL('../../config/recipes/ar4-visible.yaml', import.meta.url));
const PROFILE = fileURLToPath(new URL('../../config/sim/uncalibrated.yaml', import.meta.url));

describe('fringe calibrate', () => {
  let dir = '';
  let run = '';
  let measured = '';
  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'fringe-calibrate-'));
    measured = join(dir, 'part.csv');
    const sim = await runCli('simulate', RECIPE, '--profile', PROFILE, '--seed', '3', '--journal', join(dir, 'runs'), '--measured-out', measured);
    expect(sim.code).toBe(0);
    run = join(dir, 'runs', readdirSync(join(dir, 'runs'))[0] as string);
  }, 120_000);

  it('simulate --measured-out writes the design band at 1 nm in the form the reader takes', () => {
    const s = parseMeasuredSpectrum(readFileSync(measured, 'utf8'), measured, { quantity: 'T' });
    expect(s.scale).toBe('percent');
    expect(s.wavelengthsNm[0]).toBe(420); // the AR design's band, 420–680 nm
    expect(s.wavelengthsNm.length).toBe(261);
    expect(s.wavelengthsNm[1]).toBe(421);
  });

  it(
    'prints the JSON the issue gives, keeps calibration.json beside the run, writes the corrected recipe and the plot',
    async () => {
      const out = join(dir, 'next', 'recipe.yaml');
      const plot = join(dir, 'cal.svg');
      const r = await runCli('calibrate', run, '--measured', measured, '--json', '--out', out, '--recipe', RECIPE, '--plot', plot);
      expect(r.err).toBe('');
      expect(r.code).toBe(0);
      const json = JSON.parse(r.out) as Record<string, unknown>;
      expect(Object.keys(json).slice(0, 4)).toEqual(['materials', 'layers', 'residuals', 'warnings']);
      const materials = json.materials as Record<string, Record<string, { value: number; sigma: number }>>;
      expect(Object.keys(materials).sort()).toEqual(['SiO2', 'TiO2']);
      expect(Object.keys(materials.TiO2 ?? {})).toEqual(['indexFactor', 'chipRatio', 'toolingFactor']);
      expect(Object.keys(materials.TiO2?.chipRatio ?? {})).toEqual(['value', 'sigma']);
      const layers = json.layers as { number: number; partNm: number; sigmaNm: number }[];
      expect(layers.map((l) => l.number)).toEqual([1, 2, 3, 4]);
      expect(Object.keys(layers[0] ?? {})).toEqual(['number', 'partNm', 'sigmaNm']);
      expect(JSON.parse(readFileSync(join(run, 'calibration.json'), 'utf8'))).toMatchObject({ materials: json.materials });
      // The next recipe: the same design, the calibrated factors, a comment naming the run and the file.
      const text = readFileSync(out, 'utf8');
      expect(text).toContain(`run ${run.split('/').pop() ?? ''}`);
      expect(text).toContain(`measured ${measured}`);
      const next = loadRecipe(out);
      const before = loadRecipe(RECIPE);
      expect(next.layers.map((l) => l.targetNm)).toEqual(before.layers.map((l) => l.targetNm));
      const tio2 = next.layers.find((l) => l.materialName === 'TiO2');
      expect(tio2?.chipRatio).toBeCloseTo(materials.TiO2?.chipRatio?.value ?? 0, 4);
      expect(tio2?.toolingFactor).toBeCloseTo(materials.TiO2?.toolingFactor?.value ?? 0, 4);
      expect(readFileSync(plot, 'utf8')).toMatch(/<svg[\s\S]*measured part\.csv[\s\S]*calibrated model/);
    },
    120_000,
  );

  it('--profile-out writes a simulator profile that loads and holds the calibrated errors against the recipe', async () => {
    const file = join(dir, 'chamber.yaml');
    const r = await runCli('calibrate', run, '--measured', measured, '--json', '--profile-out', file);
    expect(r.code).toBe(0);
    const json = JSON.parse(r.out) as { materials: Record<string, Record<string, { value: number }>> };
    const profile = loadSimProfile(file);
    const before = loadRecipe(RECIPE); // chip ratio and tooling 1 for both materials
    const tio2 = before.layers.find((l) => l.materialName === 'TiO2');
    expect(profile.sources.TiO2?.chipRatioErrorPercent).toBeCloseTo(100 * ((json.materials.TiO2?.chipRatio?.value ?? 0) / (tio2?.chipRatio ?? 1) - 1), 4);
    expect(profile.sources.SiO2?.toolingErrorPercent).toBeCloseTo(100 * ((json.materials.SiO2?.toolingFactor?.value ?? 0) - 1), 4);
    expect(profile.materials.TiO2?.indexOffsetPercent).toBeCloseTo(100 * ((json.materials.TiO2?.indexFactor?.value ?? 0) - 1), 4);
    // The monitor's noise as the run showed it: the uncalibrated profile's 0.1 % within a tenth.
    expect(profile.optical.noisePercent).toBeGreaterThan(0.09);
    expect(profile.optical.noisePercent).toBeLessThan(0.11);
    // The process as the journal showed it, against config/sim/uncalibrated.yaml's settings:
    // shutter delay 0.2 s (jitter 0.02 s) from the acknowledgements, rate 2 % over the recipe's
    // with a 2 s ramp and 2 % rms fluctuation from the crystal (4 layers: the rate level carries
    // the fluctuation's mean over two layers, ~1.5 %).
    for (const name of ['TiO2', 'SiO2']) {
      const source = profile.sources[name];
      expect(source?.shutterDelayS).toBeGreaterThan(0.17);
      expect(source?.shutterDelayS).toBeLessThan(0.23);
      expect(source?.shutterJitterS).toBeLessThan(0.05);
      expect(Math.abs((source?.rateBiasPercent ?? Number.NaN) - 2)).toBeLessThan(4);
      expect(Math.abs((source?.rampTimeConstantS ?? Number.NaN) - 2)).toBeLessThan(1.5);
      expect(source?.fluctuationPercent).toBeGreaterThan(0.5);
      expect(source?.fluctuationPercent).toBeLessThan(4);
    }
    // calibration.json keeps the same profile, which fringe whatif runs on.
    expect(SimProfileSchema.parse((JSON.parse(readFileSync(join(run, 'calibration.json'), 'utf8')) as { profile: unknown }).profile)).toEqual(profile);
  }, 120_000);

  it('prints a table for people', async () => {
    const r = await runCli('calibrate', run, '--measured', measured);
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/material +index factor +chip ratio/);
    expect(r.out).toMatch(/correlations of the factors/);
  }, 120_000);

  it('refuses in one sentence: no run, a folder with no journal, a bad measured line, --out without --recipe, a bad --quantity', async () => {
    const cases: [string[], RegExp][] = [
      [[], /needs at least one RUN/],
      [[dir], /journal\.ndjson/],
      [[run, '--out', join(dir, 'x.yaml')], /--out needs --recipe FILE/],
      [[run, '--quantity', 'A'], /--quantity must be T or R/],
    ];
    // A run that never deposited a layer: its header and its recipe, nothing else.
    const empty = join(dir, 'empty-run');
    mkdirSync(empty);
    writeFileSync(join(empty, 'journal.ndjson'), `${readFileSync(join(run, 'journal.ndjson'), 'utf8').split('\n')[0] ?? ''}\n`);
    copyFileSync(join(run, 'recipe.json'), join(empty, 'recipe.json'));
    cases.push([[empty], /records no layer that was deposited/]);
    const bad = join(dir, 'bad.csv');
    writeFileSync(bad, 'nm,T\n500,90\nEnd of data\n');
    cases.push([[run, '--measured', bad], /bad\.csv line 3: expected a wavelength in nm and a T value/]);
    for (const [args, pattern] of cases) {
      const r = await runCli('calibrate', ...args);
      expect(r.code).not.toBe(0);
      expect(r.err).toMatch(pattern);
      expect(r.err.trim().split('\n')).toHaveLength(1);
    }
  }, 120_000);
});
