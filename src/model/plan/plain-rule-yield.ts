/**
 * The yield the plan predicts for the plain rules (strategy `plain`): a Monte Carlo that cuts
 * every sampled run layer by layer as the rules do, on the chip as it truly grew.
 *
 * The plain rules know nothing of the errors below: a level cut ends where the true signal —
 * the chip's layers as deposited, the film's true index — crosses the planned trigger level,
 * after the planned turns; a turning-point cut ends where the true signal turns, so that an
 * error below is made up for by the cut above it (the self-compensation of turning-point
 * monitoring, which a chain of turning points on one chip carries from layer to layer). So the
 * errors are drawn jointly, in deposition order, and not layer by layer on their own: each
 * optical layer's cut is found on its sampled chip's curve (noise-free, the detector's 1 s
 * smoothing taken as a lag, armed at 70 % of the target by the crystal, forced at 130 %), then
 * moved by the rule's own noise figure. Crystal and timed cuts as in predicted-yield.ts, but
 * never calibrated (the plain rules do not fit). Slower than the fit's model (a chip monitor per
 * layer and sampled run), so it checks proposals rather than steering the search.
 */
import { checkTolerances } from '../design/tolerances.ts';
import { chipMonitorFor, type LayerPlan, type RunPlan } from './plan.ts';
import { drawRuns, perturbedStack, type Prediction, type ProcessSpread } from './predicted-yield.ts';
import type { ResolvedRecipe } from './recipe.ts';
import { confirmStep, visibleTurns } from './turn-visibility.ts';

/** The plain rules' settings the prediction follows (the controller's defaults). */
export const PLAIN_RULES = { confirmSigma: 5, confirmMinSigma: 2, smoothingS: 1, armFraction: 0.7, thicknessCeiling: 1.3, debounceReadings: 3 } as const;

/** Steps per target thickness on which a sampled curve is walked (a crossing is then placed between two steps). */
const WALK_STEPS = 160;

export function predictPlainYield(recipe: ResolvedRecipe, plan: RunPlan, spread: ProcessSpread, options: { samples?: number; seed?: number } = {}): Prediction {
  if (recipe.design.tolerances.length === 0) return { samples: 0, yieldPercent: null, meanMaxAbsT: null };
  const samples = options.samples ?? 200;
  const { z, width, materials } = drawRuns(recipe, samples, options.seed ?? 1);
  const n = recipe.layers.length;
  let met = 0;
  const partNm = new Float64Array(n);
  const factors = new Float64Array(n);
  const thickness = new Float64Array(n);
  const index = new Float64Array(n);
  for (let s = 0; s < samples; s++) {
    const offset = s * width;
    const common = spread.indexOffset + spread.indexCommonSigma * (z[offset + n + materials.length] as number);
    for (let i = 0; i < n; i++) {
      const layer = recipe.layers[i] as ResolvedRecipe['layers'][number];
      const lp = plan.layers[i] as LayerPlan;
      const kappa = common + spread.indexMaterialSigma * (z[offset + n + materials.indexOf(layer.materialName)] as number);
      factors[i] = 1 + kappa;
      index[i] = kappa;
      const zi = z[offset + i] as number;
      if (lp.cut === 'level' || lp.cut === 'turning-point') {
        const chipNm = plainCut(recipe, plan, i, Array.from(partNm), Array.from(factors), zi);
        partNm[i] = chipNm / layer.chipRatio;
      } else {
        partNm[i] = layer.targetNm * (1 + (lp.precisionPercent / 100) * zi);
      }
      thickness[i] = (partNm[i] as number) / layer.targetNm - 1;
    }
    if (checkTolerances(perturbedStack(recipe, thickness, index), recipe.design.tolerances).pass) met++;
  }
  return { samples, yieldPercent: (100 * met) / samples, meanMaxAbsT: null };
}

/**
 * Where the plain rule of layer `i` ends it on the chip as sampled (part thicknesses `partNm`
 * below, index factors `factors`, the layer's own at `factors[i]`), chip nm: the signal walked
 * from the layer's start, the turns counted on its smoothed copy, the cut command where the rule
 * fires, then the shutter's delay of growth, then the rule's noise figure × `z`.
 */
function plainCut(recipe: ResolvedRecipe, plan: RunPlan, i: number, partNm: number[], factors: number[], z: number): number {
  const layer = recipe.layers[i] as ResolvedRecipe['layers'][number];
  const lp = plan.layers[i] as LayerPlan;
  const monitor = chipMonitorFor(recipe, i, partNm, { indexFactors: factors, growingIndexFactor: factors[i] as number });
  const target = lp.chipTargetNm;
  const chipRate = layer.rateNmPerS * layer.chipRatio;
  const lagNm = chipRate * PLAIN_RULES.smoothingS;
  const debounceNm = (PLAIN_RULES.debounceReadings - 1) * (chipRate / plan.sampleRateHz);
  const confirm = confirmStep(lp, plan.noise, PLAIN_RULES);
  const { trend: firstTrend, turnsNeeded } = visibleTurns(lp, confirm);
  const step = target / WALK_STEPS;
  const steps = Math.ceil(PLAIN_RULES.thicknessCeiling * WALK_STEPS);
  const ceiling = steps * step;
  const curve = new Float64Array(steps + 1);
  for (let k = 0; k <= steps; k++) curve[k] = monitor.signalAt(k * step);
  // The detector's exponential average lags a steady growth by rate × its time constant.
  const lagSteps = lagNm / step;
  const smoothedAt = (k: number): number => {
    const x = Math.max(0, k - lagSteps);
    const j = Math.min(steps - 1, Math.floor(x));
    return (curve[j] as number) + (x - j) * ((curve[j + 1] as number) - (curve[j] as number));
  };
  let trend = firstTrend;
  let extreme = Number.NaN;
  let turns = 0;
  let cutAt = ceiling;
  for (let k = 0; k <= steps; k++) {
    const smoothed = smoothedAt(k);
    if (Number.isNaN(extreme) || (trend > 0 ? smoothed > extreme : smoothed < extreme)) extreme = smoothed;
    else if (trend > 0 ? smoothed < extreme - confirm : smoothed > extreme + confirm) {
      turns++;
      trend = trend > 0 ? -1 : 1;
      extreme = smoothed;
    }
    // Armed by the crystal, which reads the physical thickness.
    if (k * step < PLAIN_RULES.armFraction * target) continue;
    if (lp.cut === 'turning-point') {
      if (turns >= turnsNeeded + 1 && Math.abs(smoothed - extreme) >= layer.overshootFraction * lp.swing) {
        cutAt = k * step;
        break;
      }
    } else if (turns >= turnsNeeded) {
      const value = curve[k] as number;
      const goingUp = lp.direction === 'turning' ? trend > 0 : lp.direction === 'rising';
      if (goingUp ? value >= lp.triggerSignal : value <= lp.triggerSignal) {
        // The crossing placed between this step and the one before.
        const before = curve[Math.max(0, k - 1)] as number;
        const fraction = value === before ? 0 : (lp.triggerSignal - before) / (value - before);
        cutAt = (k - 1 + Math.min(1, Math.max(0, fraction))) * step + debounceNm;
        break;
      }
    }
  }
  // A level's trigger allows for the shutter's delay; a turn is cut when seen, and grows on.
  const delayNm = cutAt >= ceiling ? 0 : chipRate * layer.shutterDelayS;
  return Math.max(0, cutAt + delayNm + lp.plainRulePrecisionNm * layer.chipRatio * z);
}
