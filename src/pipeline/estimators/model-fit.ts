/**
 * The model fit estimator (estimator `fit`): the layer's whole optical signal fitted with the
 * physics (src/model/estimate), on the crystal's part thickness over the planned rate as its clock
 * (a wandering rate then drops out of the model), or on elapsed time where the crystal is silent
 * at the layer's start. It cuts optical layers when the fitted thickness plus the shutter delay's
 * growth reaches the target, watches crystal-cut layers for the chip model, and after the close
 * gives the layer's final thickness, index and rate, and its binned readings for the chip refit.
 *
 * The fit's reading buffers are appended to in place: the one mutable part of the controller's
 * state, owned by the layer (a run, a replay and a simulation each make their own, and the reducer
 * never branches on an old state).
 */
import { buildIndexTables, createLayerFit, layerSignalTable, type FinalEstimate, type LayerFit, type RefitLayer } from '../../model/estimate/index.ts';
import { chipMonitorFor, type LayerPlan } from '../../model/plan/plan.ts';
import { DEFAULT_PRIORS } from '../../model/plan/precision.ts';
import type { CutMode, ResolvedRecipe } from '../../model/plan/recipe.ts';
import { INDEX_RUN_SIGMA } from '../../model/plan/stack-precision.ts';
import { cutAt, type CutRule, type RecipeLayer, type ThicknessEstimate } from '../rules/cut-rule.ts';

export interface FitRun {
  readonly fit: LayerFit;
  /** The fit's clock is the crystal's part thickness over the planned rate (s), or elapsed time. */
  readonly clock: 'crystal' | 'time';
}

/** The fit and its clock at the present instant: what the fit's cut rule judges. */
export interface FitNow {
  readonly run: FitRun;
  readonly clockS: number;
}

/** A material's factor over the design (index, or rate on the crystal's clock), with its rms. */
export interface MaterialEstimate {
  readonly factor: number;
  readonly sigma: number;
}

/** Half-width of the index difference behind the fit's index tables (signal-table.ts). */
const INDEX_DELTA = 0.01;
/**
 * How far a material's rate scale on the crystal's clock may move between its layers in one run,
 * rms (tooling and vapour distribution hold within a run as the index does, INDEX_RUN_SIGMA;
 * common practice, no source).
 */
export const RATE_RUN_SIGMA = 0.003;
/**
 * Prior rms of the chip thickness when the crystal's clock starts, nm: the crystal and the chip
 * start growing at the same shutter opening, so it is the crystal's noise and heat shift, a tenth
 * of a nanometre or so (derived from config/sim/typical.yaml's 0.05 Hz and 3 Hz; allowed 0.5).
 */
export const CLOCK_START_SIGMA_NM = 0.5;
/**
 * A monitor measured noisier than the recipe says by more than this factor is taken at its
 * measured noise. The fit's Huber and spike thresholds are in units of the noise: at the
 * recipe's 0.1 % on a monitor at 0.5 % (the harsh profile) a third of the honest readings counted
 * as spikes and the rest were clipped, and the edge filter's first level layer came out 1.5×
 * worse than the plain rule's. Within the factor the recipe's figure stands: the measurement
 * from a layer's readings scatters by a few per cent, and a monitor a little noisier than
 * stated costs the fit nothing measurable (common practice, no source).
 */
export const NOISIER_THAN_STATED = 1.5;

/** The noise the fits take: the recipe's, or the monitor's as measured where it is clearly more (NaN: not measured yet). */
export function fitNoise(statedNoise: number, measuredNoise: number): number {
  return measuredNoise > NOISIER_THAN_STATED * statedNoise ? measuredNoise : statedNoise;
}

/** Readings the fit needs before it says anything of the layer. */
const FIT_MIN_READINGS = 8;

/** Bins of a layer's readings kept for the chip refit: while it grew, and after the close. */
const RECORD_BINS = 60;
const RECORD_BINS_AFTER = 6;

/** What the fit's clock is read from: the layer's opening and cut, and the crystal's last thickness and rate. */
export interface FitClockSource {
  readonly openedAtS: number;
  readonly cutAtS: number;
  readonly crystal: { readonly partNm: number; readonly rateNmPerS: number; readonly lastS: number };
}

/** The fit's clock at run time t: the crystal's part thickness over the planned rate, or elapsed time. */
export function fitClockAt(layer: RecipeLayer, run: { readonly clock: FitRun['clock'] } | null, source: FitClockSource, timeS: number): number {
  if (run?.clock !== 'crystal') return timeS - source.openedAtS;
  const c = source.crystal;
  // Before the layer's first crystal reading: elapsed time, the same clock at the planned rate.
  if (!Number.isFinite(c.partNm)) return timeS - source.openedAtS;
  const rate = Number.isFinite(c.rateNmPerS) ? c.rateNmPerS : layer.rateNmPerS;
  // Between crystal readings the thickness moves on at the crystal's rate (not after the close).
  const closeS = Number.isFinite(source.cutAtS) ? source.cutAtS + layer.shutterDelayS : Number.POSITIVE_INFINITY;
  const ahead = Math.max(0, Math.min(timeS, closeS) - c.lastS);
  return (c.partNm + rate * ahead) / layer.rateNmPerS;
}

/** What a fit of a layer about to start needs: the layer, the chip below as estimated, and what the material's earlier layers showed. */
export interface FitStart {
  readonly recipe: ResolvedRecipe;
  readonly index: number;
  readonly plan: LayerPlan;
  /** The finished layers as the chip model takes them: part thickness and index factor. */
  readonly stack: { readonly partNm: readonly number[]; readonly indexFactors: readonly number[] };
  readonly materialIndex: Readonly<Record<string, MaterialEstimate>>;
  readonly materialRate: Readonly<Record<string, MaterialEstimate>>;
  /** rms of one optical reading (fraction of full scale). */
  readonly noise: number;
  /** Prior rms of a material's first layer's index (0: no index fitted). */
  readonly indexSigma: number;
}

/**
 * A model fit for the layer about to start, on the chip as the estimates left it, its index and
 * its rate on the crystal's clock starting from what the material's earlier layers showed. (The
 * monitor's gain is not carried over from the layer below: at a high-reflectance stack's low
 * transmission the chip model's small errors move the signal's level by per cents, and a gain
 * held to the last layer's would push that into κ.)
 */
export function startFit(start: FitStart, clock: 'crystal' | 'time'): FitRun {
  const { recipe, index: layerIndex, plan, stack } = start;
  const layer = recipe.layers[layerIndex] as RecipeLayer;
  const view = { indexFactors: stack.indexFactors };
  const monitor = chipMonitorFor(recipe, layerIndex, stack.partNm, view);
  const table = layerSignalTable(monitor, plan.chipTargetNm);
  const withIndex = start.indexSigma > 0;
  const index = withIndex
    ? buildIndexTables(
        table,
        chipMonitorFor(recipe, layerIndex, stack.partNm, { ...view, growingIndexFactor: 1 + INDEX_DELTA }),
        chipMonitorFor(recipe, layerIndex, stack.partNm, { ...view, growingIndexFactor: 1 - INDEX_DELTA }),
        INDEX_DELTA,
      )
    : undefined;
  const known = start.materialIndex[layer.materialName];
  const rateKnown = clock === 'crystal' ? start.materialRate[layer.materialName] : undefined;
  const fit = createLayerFit({
    monitor,
    table,
    targetNm: plan.chipTargetNm,
    rateNmPerS: layer.rateNmPerS * layer.chipRatio * (rateKnown?.factor ?? 1),
    rateSigmaFraction: rateKnown ? Math.hypot(rateKnown.sigma / rateKnown.factor, RATE_RUN_SIGMA) : DEFAULT_PRIORS.rateSigmaFraction,
    gainSigma: DEFAULT_PRIORS.gainSigma,
    offsetSigma: DEFAULT_PRIORS.offsetSigma,
    noise: start.noise,
    ...(clock === 'crystal' ? { startSigmaNm: CLOCK_START_SIGMA_NM } : {}),
    ...(index ? { indexSigma: known ? Math.hypot(known.sigma, INDEX_RUN_SIGMA) : start.indexSigma, indexFactor: known?.factor ?? 1, indexTables: index } : {}),
  });
  return { fit, clock };
}

/** Takes an optical reading at the fit's clock `clockS`: one update, warm-started. */
export function readFit(run: FitRun, clockS: number, value: number): void {
  run.fit.add(clockS, value);
  run.fit.update();
}

/**
 * The fit's thickness on the parts at the design index (what the cut compares with the target)
 * and its rms at the fit's clock `clockS`, nm; null before it has readings enough to say.
 */
function fitThickness(run: FitRun, clockS: number, layer: RecipeLayer): ThicknessEstimate | null {
  const e = run.fit.estimate(clockS);
  if (!Number.isFinite(e.thicknessNm) || !Number.isFinite(e.sigmaNm) || e.readings < FIT_MIN_READINGS) return null;
  return { thicknessNm: e.thicknessNm / layer.chipRatio, sigmaNm: e.sigmaNm / layer.chipRatio };
}

/** The fit's view of the layer at run time `timeS`, for display (see {@link fitThickness}). */
export function fitEstimateAt(layer: RecipeLayer, run: FitRun, source: FitClockSource, timeS: number): ThicknessEstimate | null {
  return fitThickness(run, fitClockAt(layer, run, source, timeS), layer);
}

/**
 * The fit's cut of an optical layer: when the fitted thickness, one shutter delay on, reaches the
 * chip target (plus a turning-point layer's overshoot). Its clock runs at the crystal rate over
 * the planned one (1 on the time clock); it cuts at the reading nearest the right instant: up to
 * half a reading interval early.
 */
export const modelFitRule: CutRule<FitNow> = fitCutRule('model-fit');

/**
 * An optical layer handed to the crystal while its monitor is away (or back with too little of
 * the layer left, {@link leftToCrystal}): the crystal calibrated by the layer's own fit. On the
 * crystal's clock the fit carries on without readings, u = u₀ + r·c: its rate r on that clock is
 * this layer's calibration of the crystal (the material's earlier layers are its prior, so it
 * knows at least what they knew), u₀ where the layer stood. The material's calibration alone cut
 * the harsh profile's AR layer 4 at once when the monitor went quiet, 6 % thin.
 */
export const fitCalibratedCrystalRule: CutRule<FitNow> = fitCutRule('crystal-calibrated');

/**
 * Whether the fit cuts the layer through a gap of its monitor: an optical layer on the crystal,
 * with the fit on the crystal's clock and readings enough to have calibrated it (else the
 * crystal's own rule cuts).
 */
export function fitBridges(run: FitRun | null, mode: CutMode, planned: CutMode): boolean {
  return run?.clock === 'crystal' && mode === 'crystal' && (planned === 'level' || planned === 'turning-point') && run.fit.readings().times.length >= FIT_MIN_READINGS;
}

/**
 * Below this much left of a layer (part nm) a monitor answering again leaves the layer with the
 * crystal calibrated by the fit: the plan's precision of the optical cut over the recipe's
 * tooling uncertainty (the plan's figure for the crystal, 1 % by default). What the crystal adds
 * to the cut grows with what is left of the layer, at most that fraction of it when calibrated
 * by the recipe alone (by the fit it does better), and below the floor it is within the optical
 * cut's own precision: the readings after the gap could not improve the cut by anything the plan
 * can tell, and they go into the fit all the same. Infinity where the recipe says the tooling is
 * exact. The layers below are left out of the precision: they err alike for both cuts.
 */
export function resumeFloorNm(plan: LayerPlan, toolingSigmaPercent: number): number {
  return toolingSigmaPercent > 0 ? plan.precisionNm / (toolingSigmaPercent / 100) : Number.POSITIVE_INFINITY;
}

/**
 * Whether a layer the fit bridges stays with the crystal when its monitor answers again: what
 * the fit says is left of it is under {@link resumeFloorNm}. Also that figure, part nm (NaN
 * before the fit has readings enough).
 */
export function leftToCrystal(layer: RecipeLayer, plan: LayerPlan, run: FitRun, source: FitClockSource, timeS: number, toolingSigmaPercent: number): { stays: boolean; leftNm: number; floorNm: number } {
  const estimate = fitEstimateAt(layer, run, source, timeS);
  const leftNm = estimate ? plan.targetNm - estimate.thicknessNm : Number.NaN;
  const floorNm = resumeFloorNm(plan, toolingSigmaPercent);
  return { stays: leftNm < floorNm, leftNm, floorNm };
}

function fitCutRule(reason: 'model-fit' | 'crystal-calibrated'): CutRule<FitNow> {
  return {
    estimate: ({ run, clockS }, now) => fitThickness(run, clockS, now.layer),
    decide({ run, clockS }, now) {
      const { layer, plan } = now;
      const clockRate = run.clock === 'crystal' ? now.rateNmPerS / layer.rateNmPerS : 1;
      // The overshoot is the planned mode's, whichever instrument cuts the layer now.
      const cutClock = run.fit.cutTimeS(plan.chipTargetNm + fitOvershootNm(plan.cut, layer.overshootFraction, plan), layer.shutterDelayS * clockRate);
      const halfStep = (0.5 * clockRate) / now.sampleRateHz;
      if (!(now.armed && clockS + halfStep >= cutClock)) return null;
      const est = run.fit.estimate(cutClock + layer.shutterDelayS * clockRate);
      return cutAt(reason, est.thicknessNm / est.indexFactor / layer.chipRatio, now.delayNm);
    },
  };
}

/**
 * A turning-point layer's set overshoot, for the fit: the recipe gives it as the fraction of the
 * swing by which the signal has come back past the extremum, the plain rule's measure; in
 * thickness that is √(2·f·swing/|S″|) past the turning point (S ≈ S_tp + ½S″Δd², as the plain
 * rule's precision in precision.ts). Chip nm; 0 for other layers or no overshoot.
 */
function fitOvershootNm(mode: CutMode, fraction: number, plan: LayerPlan): number {
  if (mode !== 'turning-point' || !(fraction > 0) || !(Math.abs(plan.curvaturePerNm2) > 0)) return 0;
  return Math.sqrt((2 * fraction * plan.swing) / Math.abs(plan.curvaturePerNm2));
}

/** What the fit concluded of a finished layer. */
export interface FitConclusion {
  /** Refitted with every reading, those after the close included; null where it is no usable thickness. */
  readonly final: FinalEstimate | null;
  /** The layer's readings binned for the chip refit (crystal clock only), or null. */
  readonly record: RefitLayer | null;
}

/**
 * The layer's end: refit with every reading, those after the shutter closed included (u constant
 * then from `closeClock`), and, with `keepRecord`, its readings binned for the chip refit.
 */
export function concludeFit(run: FitRun, index: number, closeClock: number, keepRecord: boolean): FitConclusion {
  const final = run.fit.finalThickness(closeClock);
  const record = run.clock === 'crystal' && keepRecord ? binnedRecord(run.fit, index, closeClock) : null;
  const usable = Number.isFinite(final.thicknessNm) && final.indexFactor > 0 && final.thicknessNm > 0;
  return { final: usable ? final : null, record };
}

/**
 * A layer's readings on the crystal's clock as bin means (spikes left out), each with its count
 * as its weight: over a bin of a few seconds the signal is straight to far below the noise, so
 * the means keep nearly all the information at a hundredth of the cost.
 */
function binnedRecord(fit: LayerFit, index: number, closeClock: number): RefitLayer | null {
  const { times, values, spikes } = fit.readings();
  const before: number[] = [];
  const after: number[] = [];
  for (let i = 0; i < times.length; i++) {
    if (spikes[i] !== 0 || !Number.isFinite(times[i])) continue;
    ((times[i] as number) < closeClock ? before : after).push(i);
  }
  if (before.length < 8) return null;
  const clocks: number[] = [];
  const means: number[] = [];
  const weights: number[] = [];
  for (const [group, bins] of [[before, RECORD_BINS], [after, RECORD_BINS_AFTER]] as const) {
    const count = Math.min(bins, group.length);
    for (let b = 0; b < count; b++) {
      const from = Math.floor((b * group.length) / count);
      const to = Math.floor(((b + 1) * group.length) / count);
      let clock = 0;
      let value = 0;
      for (let k = from; k < to; k++) {
        clock += times[group[k] as number] as number;
        value += values[group[k] as number] as number;
      }
      clocks.push(clock / (to - from));
      means.push(value / (to - from));
      weights.push(to - from);
    }
  }
  return { index, clocks: Float64Array.from(clocks), values: Float64Array.from(means), weights: Float64Array.from(weights), closeClock };
}
