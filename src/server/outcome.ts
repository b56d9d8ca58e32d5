/**
 * The outcome panel's spectrum: the stack as deposited so far — the estimated achieved
 * thickness of every finished layer, the design's for the rest — against the design, over the
 * design's band (else the monitor's range), at normal incidence, mean polarisation.
 */
import { spectrumDeviation } from '../model/design/spectrum-deviation.ts';
import type { StackSpec } from '../model/optics/optical-model.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import type { OutcomeView } from './views.ts';

/** Points across the band (the step is rounded to a whole or half nanometre). */
const TARGET_POINTS = 200;

export function outcomeSpectrum(recipe: ResolvedRecipe, achievedNm: readonly number[]): OutcomeView {
  const design = recipe.design.stack;
  const band = recipe.design.band ?? { fromNm: recipe.monitor.rangeNm[0], toNm: recipe.monitor.rangeNm[1] };
  const raw = (band.toNm - band.fromNm) / TARGET_POINTS;
  const stepNm = raw <= 0.5 ? 0.5 : Math.round(raw);
  const used = Math.min(achievedNm.length, design.layers.length);
  const deposited: StackSpec = {
    ...design,
    layers: design.layers.map((layer, i) => {
      const estimate = i < used ? (achievedNm[i] as number) : layer.thicknessNm;
      // A skipped or failed layer may carry NaN or a negative figure: treat it as not deposited.
      return { dispersion: layer.dispersion, thicknessNm: Number.isFinite(estimate) && estimate > 0 ? estimate : 0 };
    }),
  };
  const d = spectrumDeviation(design, deposited, band, { stepNm });
  const meanR = d.design.R.reduce((s, r) => s + r, 0) / d.design.R.length;
  return {
    fromNm: band.fromNm,
    toNm: band.toNm,
    wavelengthsNm: Array.from(d.wavelengthsNm),
    design: { R: Array.from(d.design.R), T: Array.from(d.design.T) },
    deposited: { R: Array.from(d.deposited.R), T: Array.from(d.deposited.T) },
    // Antireflection coatings and mirrors are judged by R, filters by T (common practice, no source).
    preferred: meanR < 0.1 || meanR > 0.9 ? 'R' : 'T',
    layersEstimated: used,
    maxAbsT: d.maxAbsT,
    meanAbsT: d.meanAbsT,
    maxAbsR: d.maxAbsR,
    meanAbsR: d.meanAbsR,
  };
}
