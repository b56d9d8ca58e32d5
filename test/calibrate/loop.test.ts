// The loop closes: a run on a chamber with hidden errors (the uncalibrated profile), calibrated
// from its journal and one measured spectrum (simulated noise 0.2 %T) through the command line,
// then the written recipe run on the same chamber: the rms error on the parts in n·d falls to
// within 1.5× of what the same chamber gives once calibrated (its errors zeroed), and the edge
// filter's worst spectral deviation from the design is at least halved.
import { mkdtempSync, readdirSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { SimProfileSchema, type SimProfile } from '../../sim/index.ts';
import { simulateRun } from '../../src/cli/commands/simulate.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { runCli } from '../support/run-cli.ts';
import { stringify } from 'yaml';

const RECIPE = fileURLToPath(new URL('../../config/recipes/edge-longpass-visible.yaml', import.meta.url));

/** The uncalibrated chamber (config/sim/uncalibrated.yaml) with the index scatter off, so that n_true = 1.01·n_design exactly and n·d follows from the thickness. */
const INDEX_FACTOR = 1.01;
function chamber(chipErrorPercent: Record<string, number>, toolingErrorPercent: Record<string, number>): SimProfile {
  const sources: Record<string, unknown> = { default: { chipRatioErrorPercent: 0.5, toolingErrorPercent: 1.5 } };
  for (const name of Object.keys(chipErrorPercent)) sources[name] = { chipRatioErrorPercent: chipErrorPercent[name], toolingErrorPercent: toolingErrorPercent[name] };
  return SimProfileSchema.parse({ formatVersion: 1, name: 'uncalibrated, no index scatter', sources, materials: { default: { indexOffsetPercent: 1, indexScatterPercent: 0 } } });
}

function opticalRmsPercent(layers: readonly { targetNm: number; trueNm: number }[]): number {
  const e = layers.map((l) => 100 * ((INDEX_FACTOR * l.trueNm) / l.targetNm - 1));
  return Math.sqrt(e.reduce((s, x) => s + x * x, 0) / e.length);
}

describe('closing the loop across runs', () => {
  it(
    'a recipe calibrated from one run and one measured spectrum brings the n·d error on the parts near the calibrated chamber',
    async () => {
      const dir = mkdtempSync(join(tmpdir(), 'fringe-loop-'));
      const original = loadRecipe(RECIPE);
      const uncalibrated = chamber({}, {});
      const profileFile = join(dir, 'chamber.yaml');
      writeFileSync(profileFile, stringify(uncalibrated));
      const seed = 7;
      const sim = await runCli('simulate', RECIPE, '--profile', profileFile, '--seed', String(seed), '--journal', join(dir, 'runs'), '--measured-out', join(dir, 'part.csv'), '--json');
      expect(sim.code).toBe(0);
      const before = JSON.parse(sim.out) as { layers: { targetNm: number; trueNm: number }[]; spectrum: { maxAbsT: number } };
      const run = join(dir, 'runs', readdirSync(join(dir, 'runs'))[0] as string);
      const next = join(dir, 'next.yaml');
      const cal = await runCli('calibrate', run, '--measured', join(dir, 'part.csv'), '--out', next, '--recipe', RECIPE);
      expect(cal.err).toBe('');
      const corrected: ResolvedRecipe = loadRecipe(next);

      // The same chamber: its true chip ratios and tooling factors are the first recipe's × the
      // profile's errors; expressed against the new recipe's values.
      const chip: Record<string, number> = {};
      const tooling: Record<string, number> = {};
      for (const name of ['TiO2', 'SiO2']) {
        const a = original.layers.find((l) => l.materialName === name) as ResolvedRecipe['layers'][number];
        const b = corrected.layers.find((l) => l.materialName === name) as ResolvedRecipe['layers'][number];
        chip[name] = 100 * ((a.chipRatio * 1.005) / b.chipRatio - 1);
        tooling[name] = 100 * ((a.toolingFactor * 1.015) / b.toolingFactor - 1);
      }
      const after = await simulateRun(corrected, { profile: chamber(chip, tooling), profileName: 'same chamber', seed: seed + 1, speed: Number.POSITIVE_INFINITY, progress: false });
      const calibratedChamber = await simulateRun(original, { profile: chamber({ TiO2: 0, SiO2: 0 }, { TiO2: 0, SiO2: 0 }), profileName: 'calibrated', seed: seed + 1, speed: Number.POSITIVE_INFINITY, progress: false });
      const figures = {
        before: opticalRmsPercent(before.layers),
        after: opticalRmsPercent(after.layers),
        calibrated: opticalRmsPercent(calibratedChamber.layers),
        worstTBefore: before.spectrum.maxAbsT,
        worstTAfter: after.spectrum?.maxAbsT ?? Number.NaN,
        worstTCalibrated: calibratedChamber.spectrum?.maxAbsT ?? Number.NaN,
      };
      console.log(
        `loop: n·d rms ${figures.before.toFixed(3)} % before, ${figures.after.toFixed(3)} % after, ${figures.calibrated.toFixed(3)} % on the calibrated chamber; ` +
          `worst |ΔT| ${(100 * figures.worstTBefore).toFixed(2)} → ${(100 * figures.worstTAfter).toFixed(2)} pp (calibrated chamber ${(100 * figures.worstTCalibrated).toFixed(2)} pp)`,
      );
      expect(figures.after).toBeLessThan(figures.before);
      expect(figures.after).toBeLessThanOrEqual(1.5 * figures.calibrated);
      // The edge filter's worst spectral deviation at least halved.
      expect(figures.worstTAfter).toBeLessThanOrEqual(0.5 * figures.worstTBefore);
    },
    600_000,
  );
});
