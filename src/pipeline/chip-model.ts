/**
 * The chip model: the finished layers as the estimates have them (thickness and index), the
 * chip refit that revises them together, and the compensation that re-targets the layers still
 * to come. Pure functions of the controller's state; the re-plan and the estimators of the next
 * layers start from what they give.
 */
import { compensate } from '../model/design/compensate.ts';
import { readingNoise, refitChip, type RefitLayer, type RefitLayerResult } from '../model/estimate/index.ts';
import { scaledDispersion } from '../model/optics/dispersion.ts';
import { DEFAULT_PRIORS } from '../model/plan/precision.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import type { ControllerContext } from './controller-options.ts';
import { layerPlanOf, type ControllerState } from './controller-state.ts';
import { CLOCK_START_SIGMA_NM, concludeFit, fitBridges, fitClockAt, fitNoise, RATE_RUN_SIGMA } from './estimators/model-fit.ts';
import type { RunEvent } from './events.ts';
import { resolvedStack } from './resolved-stack.ts';
import type { RecipeLayer } from './rules/cut-rule.ts';

/**
 * Layers refitted together: the last few on the chip, those below held at their estimates. The
 * refit's cost grows with the square of its layers; the readings of a layer tell mostly about
 * itself and the few below it (common practice, no source: 8 keeps a refit within tens of ms).
 */
export const REFIT_LAYERS = 8;

/**
 * Refits the current chip's recorded layers together (src/model/estimate/chip-refit.ts) and
 * takes its thicknesses, indices and material factors for everything that follows.
 */
export function refitRecords(ctx: ControllerContext, s: ControllerState): ControllerState {
  const { recipe, opts, noise } = ctx;
  const stack = resolvedStack(recipe, s);
  const first = (s.chipRecords[0] as RefitLayer).index;
  const priors = s.materialAfter[first - 1] ?? { rate: {}, index: {} };
  const result = refitChip(recipe, s.chipRecords, {
    noise: fitNoise(noise, s.monitorNoise),
    fixedPartNm: stack.partNm,
    fixedIndexFactors: stack.indexFactors,
    ratePriors: priors.rate,
    indexPriors: priors.index,
    defaultRateSigma: DEFAULT_PRIORS.rateSigmaFraction,
    defaultIndexSigma: opts.indexSigma > 0 ? opts.indexSigma : 1e-6,
    startSigmaNm: CLOCK_START_SIGMA_NM,
    rateSpread: RATE_RUN_SIGMA,
    gainSigma: DEFAULT_PRIORS.gainSigma,
    offsetSigma: DEFAULT_PRIORS.offsetSigma,
    startRate: Object.fromEntries(Object.entries(s.materialRate).map(([name, r]) => [name, r.factor])),
    startIndex: Object.fromEntries(Object.entries(s.materialIndex).map(([name, r]) => [name, r.factor])),
  });
  const achievedNm = [...s.achievedNm];
  const indexFactors = [...s.indexFactors];
  for (const l of result.layers) {
    if (!(l.partNm > 0) || !(l.indexFactor > 0)) continue;
    achievedNm[l.index] = l.partNm;
    indexFactors[l.index] = l.indexFactor;
  }
  // The next refit starts where this one ended.
  const chipRecords = s.chipRecords.map((r, j) => ({ ...r, start: (result.layers[j] as RefitLayerResult).parameters }));
  return { ...s, achievedNm, indexFactors, chipRecords, materialRate: { ...s.materialRate, ...result.rate }, materialIndex: { ...s.materialIndex, ...result.index } };
}

/**
 * A finished layer's fit entered into the chip model: a layer the fit cut (optical) takes the
 * fit's thickness and index, and its material the fit's index (and, on the crystal's clock, its
 * rate on that clock); a layer the fit watched (cut on the crystal or the clock) the optical
 * thickness the signal showed. Without a usable fit the layer's index and optical thickness are
 * unknown (NaN). Also the layer's binned readings for the chip refit, or null.
 */
export function enterLayerFit(ctx: ControllerContext, s: ControllerState, skipped: boolean): { state: ControllerState; record: RefitLayer | null } {
  const layer = ctx.recipe.layers[s.index] as RecipeLayer;
  const indexFactors = [...s.indexFactors];
  indexFactors[s.index] = Number.NaN;
  const opticalNm = [...s.opticalNm];
  opticalNm[s.index] = Number.NaN;
  let materialIndex = s.materialIndex;
  let materialRate = s.materialRate;
  let record: RefitLayer | null = null;
  const planned = layerPlanOf(s).cut;
  // The fit judged the layer: cut on it optically, or on the crystal it calibrated through a gap.
  const fitCut = s.mode === 'level' || s.mode === 'turning-point' || fitBridges(s.fit, s.mode, planned);
  const watched = s.mode === planned && (planned === 'crystal' || planned === 'time');
  if (s.fit && !skipped && Number.isFinite(s.cutAtS) && (fitCut || watched)) {
    const closeClock = fitClockAt(layer, s.fit, s, s.cutAtS + layer.shutterDelayS);
    const conclusion = concludeFit(s.fit, s.index, closeClock, ctx.opts.chipRefit);
    record = conclusion.record;
    const final = conclusion.final;
    const partNm = s.achievedNm[s.index] ?? 0;
    if (final) {
      if (fitCut && s.fit.clock === 'crystal' && final.rateSigma > 0) {
        const plannedRate = layer.rateNmPerS * layer.chipRatio;
        materialRate = { ...materialRate, [layer.materialName]: { factor: final.rateNmPerS / plannedRate, sigma: final.rateSigma / plannedRate } };
      }
      if (fitCut) {
        // The fit's u is the optical thickness at the design index: physically u/κ at index κ·n.
        const achievedNm = [...s.achievedNm];
        achievedNm[s.index] = final.thicknessNm / final.indexFactor / layer.chipRatio;
        indexFactors[s.index] = final.indexFactor;
        // The fit's prior was the material's estimate so far: its posterior is the new estimate.
        if (final.indexSigma > 0) materialIndex = { ...materialIndex, [layer.materialName]: { factor: final.indexFactor, sigma: final.indexSigma } };
        s = { ...s, achievedNm };
      } else if (partNm > 0) {
        // Cut on the crystal and watched by the fit: the optical thickness the signal showed.
        opticalNm[s.index] = final.thicknessNm / layer.chipRatio;
      }
    }
  }
  // The monitor's noise as this layer's readings show it, for the fits of the layers after it.
  const measured = s.fit ? readingNoise(s.fit.fit.readings().values) : Number.NaN;
  const monitorNoise = Number.isFinite(measured) ? measured : s.monitorNoise;
  return { state: { ...s, indexFactors, opticalNm, materialIndex, materialRate, monitorNoise }, record };
}

/**
 * Re-optimises the thicknesses of the layers still to come so that the finished stack's
 * spectrum over the design band stays closest to the design's, the finished layers at their
 * estimates (src/model/design/compensate.ts).
 */
export function compensateRest(recipe: ResolvedRecipe, s: ControllerState, events: RunEvent[]): ControllerState {
  const compensation = recipe.compensation;
  const band = recipe.design.band as { fromNm: number; toNm: number };
  const fixed = s.index + 1;
  // The stack as deposited: the finished layers at their estimates (physical, in their
  // estimated media), the later ones in their material's estimated medium at the physical
  // thickness their cut targets (optical, in design-index nm) give, u/κ.
  const stack = resolvedStack(recipe, s);
  const factors = recipe.layers.map((l, i) => (i < fixed ? (stack.indexFactors[i] ?? 1) : (s.materialIndex[l.materialName]?.factor ?? 1)));
  const current = s.targetsNm.map((t, i) => (i < fixed ? (stack.partNm[i] ?? t) : t / (factors[i] as number)));
  const design = recipe.design.stack;
  const deposited = { ...design, layers: design.layers.map((l, i) => ({ ...l, dispersion: scaledDispersion(l.dispersion, factors[i] as number, 0) })) };
  const result = compensate(design, current, fixed, {
    deposited,
    fromNm: band.fromNm,
    toNm: band.toNm,
    quantity: compensation?.quantity ?? 'T',
    boundsFraction: (compensation?.boundsPercent ?? 10) / 100,
    stepNm: compensation?.stepNm ?? 5,
  });
  const targetsNm = Array.from(result.thicknessNm, (t, i) => (i < fixed ? (s.targetsNm[i] as number) : t * (factors[i] as number)));
  events.push({
    type: 'compensated',
    timeS: s.nowS,
    fromLayer: fixed + 1,
    beforeNm: s.targetsNm.slice(fixed),
    afterNm: targetsNm.slice(fixed),
    rmsBefore: result.rmsBefore,
    rmsAfter: result.rmsAfter,
  });
  return { ...s, targetsNm };
}

/** The recipe with other part targets (compensated), for the re-plan. */
export function withTargets(recipe: ResolvedRecipe, targetsNm: readonly number[]): ResolvedRecipe {
  return { ...recipe, layers: recipe.layers.map((l, i) => ({ ...l, targetNm: targetsNm[i] ?? l.targetNm })) };
}
