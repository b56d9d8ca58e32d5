// The calibrated chamber moved onto another recipe: a recipe with corrected chip ratios and
// tooling factors (what calibrate --out writes) must meet the same chamber, so the profile's
// errors, which are relative to the recipe, are re-based on the absolute factors calibrated.
import { describe, expect, it } from 'vitest';
import { createVirtualChamber, SimProfileSchema } from '../../sim/index.ts';
import { chamberProfile, rebaseProfile, type CalibrationResult } from '../../src/calibrate/index.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { loadShippedRecipe } from './support.ts';

describe('rebaseProfile', () => {
  const recipe = loadShippedRecipe('ar4-visible'); // chip ratio and tooling 1 for both materials
  // As calibrate writes it for that recipe: TiO2's chip ratio 1.01, its tooling 0.97; SiO2's 0.995 and 1.02.
  const profile = SimProfileSchema.parse({
    formatVersion: 1,
    name: 'calibrated',
    sources: { default: {}, TiO2: { chipRatioErrorPercent: 1, toolingErrorPercent: -3, shutterDelayS: 0.25 }, SiO2: { chipRatioErrorPercent: -0.5, toolingErrorPercent: 2 } },
  });
  const factors = { TiO2: { chipRatio: 1.01, toolingFactor: 0.97 }, SiO2: { chipRatio: 0.995, toolingFactor: 1.02 } };
  const corrected: ResolvedRecipe = {
    ...recipe,
    layers: recipe.layers.map((l) => ({ ...l, chipRatio: l.materialName === 'TiO2' ? 1.01 : 0.99, toolingFactor: l.materialName === 'TiO2' ? 0.95 : 1.02 })),
  };

  it('keeps the chamber: the same absolute chip ratio and tooling factor under a recipe that assumes others', () => {
    const rebased = rebaseProfile(profile, factors, corrected);
    // derived: error = calibrated / the recipe's − 1
    expect(rebased.sources.TiO2?.chipRatioErrorPercent).toBeCloseTo(0, 6);
    expect(rebased.sources.TiO2?.toolingErrorPercent).toBeCloseTo(100 * (0.97 / 0.95 - 1), 4);
    expect(rebased.sources.SiO2?.chipRatioErrorPercent).toBeCloseTo(100 * (0.995 / 0.99 - 1), 4);
    expect(rebased.sources.SiO2?.toolingErrorPercent).toBeCloseTo(0, 6);
    // The rest of the source's knobs stay.
    expect(rebased.sources.TiO2?.shutterDelayS).toBe(0.25);
    for (const [r, p] of [[recipe, profile], [corrected, rebased]] as const) {
      const truth = createVirtualChamber(r, p, 1).truth();
      expect(truth.sources.TiO2?.chipRatio).toBeCloseTo(1.01, 4);
      expect(truth.sources.TiO2?.toolingFactor).toBeCloseTo(0.97, 4);
      expect(truth.sources.SiO2?.chipRatio).toBeCloseTo(0.995, 4);
      expect(truth.sources.SiO2?.toolingFactor).toBeCloseTo(1.02, 4);
    }
  });

  it('leaves a profile unchanged on the recipe it was written against', () => {
    const same = rebaseProfile(profile, factors, recipe);
    expect(same.sources.TiO2?.chipRatioErrorPercent).toBeCloseTo(1, 6);
    expect(same.sources.SiO2?.toolingErrorPercent).toBeCloseTo(2, 6);
  });
});

describe('chamberProfile', () => {
  it('says so in a sentence, never throws, when the chamber found lies outside what the simulator models', () => {
    const factor = (value: number) => ({ value, sigma: 0.01 });
    // A chip ratio 80 % over the recipe's: the profile's knob stops at ±50 %.
    const result: CalibrationResult = {
      materials: { TiO2: { indexFactor: factor(1), chipRatio: factor(1.8), toolingFactor: factor(1), priorShare: { indexFactor: 0, chipRatio: 0, toolingFactor: 0 }, recipeChipRatio: 1, recipeToolingFactor: 1 } },
      layers: [],
      residuals: [],
      correlation: { names: [], matrix: [] },
      warnings: [],
      iterations: 1,
      birgeRatio: 1,
      monitorDrifts: [{ gainPerHour: 0, offsetPerHour: 0 }],
    };
    const run = { label: 'r', recipe: loadShippedRecipe('ar4-visible'), layers: [], levels: [], opticalNoise: 0.001, crystalNoiseHz: 0.05, estimatedNm: [], shutterDelaysS: {}, warnings: [] };
    const outside = chamberProfile(result, [run]);
    expect(outside).toEqual({ problem: expect.stringMatching(/^the calibrated chamber lies outside what the virtual chamber models \(sources\.TiO2\.chipRatioErrorPercent: .*\), so no simulator profile was made$/) as unknown });
    const inside = chamberProfile({ ...result, materials: { TiO2: { ...(result.materials.TiO2 as CalibrationResult['materials'][string]), chipRatio: factor(1.02) } } }, [run]);
    expect('profile' in inside && SimProfileSchema.parse(inside.profile).sources.TiO2?.chipRatioErrorPercent).toBeCloseTo(2, 6);
  });
});
