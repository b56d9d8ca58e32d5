// The calibrated chamber moved onto another recipe: a recipe with corrected chip ratios and
// tooling factors (what calibrate --out writes) must meet the same chamber, so the profile's
// errors, which are relative to the recipe, are re-based on the absolute factors calibrated.
import { describe, expect, it } from 'vitest';
import { createVirtualChamber, SimProfileSchema } from '../../sim/index.ts';
import { rebaseProfile } from '../../src/calibrate/index.ts';
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
