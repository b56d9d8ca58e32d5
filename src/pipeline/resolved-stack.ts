/**
 * The finished layers as the run knows them now, as the chip model, the re-plan, the dashboard
 * and the run's records take them: each layer's physical thickness on the parts and its index
 * over the design's. A layer the fit cut: its own estimates (u/κ and κ), revised by every chip
 * refit. A layer cut on the crystal: once the fits of its material have calibrated the
 * material's rate on the crystal's clock (ρ, to CALIBRATED_RATE_SIGMA), its crystal thickness
 * made optical, u = ρ·crystal, at the material's index (re-resolved as the calibration improves,
 * so that a first layer cut blind does not hold the chip model of the later ones hostage);
 * before that, the optical thickness the watching fit saw, else the crystal's at the material's
 * index (1 before any estimate). (Replacing a fitted layer's own estimate by ρ·crystal too was
 * tried: ρ is known to a few tenths of a per cent, a layer's own fit to a few hundredths, so it
 * loses.)
 */
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import type { ControllerState } from './controller.ts';

/** A material's rate on the crystal's clock known this well (fraction, rms) stands for the thickness of each of its layers . */
export const CALIBRATED_RATE_SIGMA = 0.005;

export interface ResolvedStack {
  /** Physical thickness of each finished layer on the parts, nm. */
  readonly partNm: readonly number[];
  /** Each finished layer's index over the design's (1 where nothing is known yet). */
  readonly indexFactors: readonly number[];
}

type StackState = Pick<ControllerState, 'achievedNm' | 'indexFactors' | 'materialRate' | 'materialIndex' | 'crystalBelow' | 'opticalNm'>;

export function resolvedStack(recipe: ResolvedRecipe, s: StackState): ResolvedStack {
  const partNm: number[] = [];
  const indexFactors: number[] = [];
  s.achievedNm.forEach((achieved, i) => {
    const layer = recipe.layers[i] as ResolvedRecipe['layers'][number];
    const fitted = s.indexFactors[i] ?? Number.NaN;
    const rate = s.materialRate[layer.materialName];
    const crystalNm = (s.crystalBelow[i]?.thicknessNm ?? 0) * layer.toolingFactor;
    const known = s.materialIndex[layer.materialName]?.factor;
    if (!Number.isNaN(fitted)) {
      partNm.push(achieved);
      indexFactors.push(fitted);
      return;
    }
    if (rate && rate.sigma < CALIBRATED_RATE_SIGMA * rate.factor && crystalNm > 0) {
      const index = known ?? 1;
      partNm.push((rate.factor * crystalNm) / index);
      indexFactors.push(index);
      return;
    }
    const watched = s.opticalNm[i] ?? Number.NaN;
    // Before any fitted layer of the material, what the watching fit saw stands for its index too.
    const index = known ?? (Number.isFinite(watched) && achieved > 0 ? Math.min(1.1, Math.max(0.9, watched / achieved)) : 1);
    partNm.push((Number.isFinite(watched) ? watched : achieved * index) / index);
    indexFactors.push(index);
  });
  // A layer a little below zero (a crystal read thinner than bare, a fit in noise about none) is no layer: the optics refuse a negative one.
  return { partNm: partNm.map((nm) => Math.max(0, nm)), indexFactors };
}
