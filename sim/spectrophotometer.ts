/**
 * The spectrophotometer that measures the finished parts: the true stack on the parts (true
 * indices and thicknesses, the design's substrate with its back face) at normal incidence,
 * unpolarised, over the design's band at 1 nm steps, with white noise from the profile.
 */
import { buildOpticalModel, spectrum } from '../src/model/optics/optical-model.ts';
import type { ResolvedRecipe } from '../src/model/plan/recipe.ts';
import type { SimProfile } from './profile.ts';
import { createRandomStream } from './random.ts';
import { trueStackSpec, type ChamberTruth } from './virtual-chamber.ts';

export interface PartMeasurement {
  readonly quantity: 'T' | 'R';
  readonly wavelengthsNm: Float64Array;
  /** Fractions, noise included. */
  readonly values: Float64Array;
  readonly noisePercent: number;
}

/** Step of the measured wavelengths, nm (a usual scan setting; common practice, no source). */
export const MEASUREMENT_STEP_NM = 1;

/**
 * The parts as a spectrophotometer reports them after the run, or null when the design has no
 * band to measure over. The noise has its own stream of `seed`, so measuring never changes the run.
 */
export function measureParts(recipe: ResolvedRecipe, truth: ChamberTruth, profile: SimProfile, seed: number, quantity: 'T' | 'R'): PartMeasurement | null {
  const band = recipe.design.band;
  if (!band) return null;
  const count = Math.floor((band.toNm - band.fromNm) / MEASUREMENT_STEP_NM + 1e-9) + 1;
  const grid = Float64Array.from({ length: count }, (_, i) => band.fromNm + i * MEASUREMENT_STEP_NM);
  const out = { R: new Float64Array(count), T: new Float64Array(count), A: new Float64Array(count) };
  spectrum(out, buildOpticalModel(trueStackSpec(recipe, truth), grid, 0), 'mean');
  const sigma = profile.spectrophotometer.noisePercent / 100;
  const noise = createRandomStream(seed, 'spectrophotometer/noise');
  const clean = quantity === 'T' ? out.T : out.R;
  const values = Float64Array.from(clean, (v) => v + (sigma > 0 ? sigma * noise.gaussian() : 0));
  return { quantity, wavelengthsNm: grid, values, noisePercent: profile.spectrophotometer.noisePercent };
}
