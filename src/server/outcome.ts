/**
 * The outcome panel's spectrum: the stack as deposited so far — every finished layer as the fits
 * know it (its physical thickness in its medium with the index the fit estimated, so that its
 * optical thickness is the fit's), the design's layers for the rest — against the design, over
 * the design's band (else the monitor's range), at normal incidence, mean polarisation.
 * A film whose index is off is cut at the design's optical thickness: its physical thickness
 * differs from the design's by the index's error, and read with the design's index it would show
 * a spectrum error the part does not have.
 */
import { spectrumDeviation } from '../model/design/spectrum-deviation.ts';
import { scaledDispersion } from '../model/optics/dispersion.ts';
import type { StackSpec } from '../model/optics/optical-model.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import type { ResolvedStack } from '../pipeline/resolved-stack.ts';
import type { OutcomeView } from './views.ts';

/** Points across the band (the step is rounded to a whole or half nanometre). */
const TARGET_POINTS = 200;

export function outcomeSpectrum(recipe: ResolvedRecipe, finished: ResolvedStack): OutcomeView {
  const achievedNm = finished.partNm;
  const design = recipe.design.stack;
  const band = recipe.design.band ?? { fromNm: recipe.monitor.rangeNm[0], toNm: recipe.monitor.rangeNm[1] };
  const raw = (band.toNm - band.fromNm) / TARGET_POINTS;
  const stepNm = raw <= 0.5 ? 0.5 : Math.round(raw);
  const used = Math.min(achievedNm.length, design.layers.length);
  const deposited: StackSpec = {
    ...design,
    layers: design.layers.map((layer, i) => {
      if (i >= used) return layer;
      const estimate = achievedNm[i] as number;
      const index = finished.indexFactors[i] ?? 1;
      // A skipped or failed layer may carry NaN or a negative figure: treat it as not deposited.
      if (!(Number.isFinite(estimate) && estimate > 0)) return { dispersion: layer.dispersion, thicknessNm: 0 };
      return { dispersion: Number.isFinite(index) && index > 0 ? scaledDispersion(layer.dispersion, index, 0) : layer.dispersion, thicknessNm: estimate };
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
