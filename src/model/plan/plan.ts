/**
 * The monitoring plan: for every layer, what the optical monitor and the crystal will show,
 * where the layer must be cut, how precisely, and what could go wrong. Pure: no I/O, no clock.
 *
 * Thicknesses: `targetNm` and precisions are on the parts; the monitoring curve's abscissa is
 * the layer's thickness on its chip (part thickness × chipRatio); the crystal's is on the
 * crystal (part thickness / tooling factor).
 */
import { indexAt, scaledDispersion, type Dispersion } from '../optics/dispersion.ts';
import { crystalLifeUsed, stackFrequencyHz, type CrystalLayer } from '../crystal/index.ts';
import { buildChipMonitor, findTurningPoints, type ChipMonitor, type ChipMonitorSpec, type TurningPoint } from './chip-monitor.ts';
import {
  DEFAULT_PRIORS,
  fitPrecisionBound,
  levelRulePrecision,
  turningPointRulePrecision,
  type FitPriors,
} from './precision.ts';
import type { CutMode, LayerRecipe, ResolvedRecipe } from './recipe.ts';
import { DEFAULT_INDEX_SIGMA, INDEX_RUN_SIGMA, layerPrecision, NEAREST, type BelowLayer } from './stack-precision.ts';
import { searchWavelengths, wholeRunWavelengths, type LayerSearch, type WavelengthSearch } from './wavelength-search.ts';

export interface PlanOptions {
  /** rms noise of one optical reading, fraction of full scale (default: the recipe's). */
  noise?: number;
  /** Optical readings per second (default: the recipe's). */
  sampleRateHz?: number;
  /** Spacing of the monitoring curves, nm on the chip (default 0.1). */
  curveStepNm?: number;
  priors?: FitPriors;
  /** Suggest monitor wavelengths: per layer (default), also for the whole run, or not at all. */
  suggest?: 'none' | 'per-layer' | 'whole-run';
  /** Step of the wavelength search, nm (default 1). */
  searchStepNm?: number;
  /** Whole-run suggestion: cost of one wavelength change, in (% of thickness)² (default 0.05). */
  changePenalty?: number;
  /**
   * Re-plan after a cut: the part thicknesses achieved by layers 1 … n (n = length). Only the
   * later layers are planned; the chips and the crystal carry the achieved layers.
   */
  achievedNm?: readonly number[];
  /** n_true / n_design of those layers, as estimated (default 1 each): the chips carry them. */
  achievedIndexFactors?: readonly number[];
  /** Work out stackPrecisionNm (default true; a re-plan in the run needs none: stackPrecisionNm = precisionNm). */
  stackPrecision?: boolean;
}

export type PlanWarningCode =
  | 'trigger-near-turning-point'
  | 'small-swing'
  | 'too-thin'
  | 'wavelength-outside-monitor'
  | 'no-turning-point-at-target'
  | 'imprecise-cut'
  | 'crystal-spent';

export interface PlanWarning {
  code: PlanWarningCode;
  message: string;
}

export interface LayerPlan {
  number: number;
  material: string;
  chip: string;
  /** 1 = the first layer on a fresh chip. */
  layerOnChip: number;
  cut: CutMode;
  targetNm: number;
  chipTargetNm: number;
  wavelengthNm: number;
  signal: 'transmission' | 'reflection';
  angleDeg: number;
  bandwidthNm: number;
  rateNmPerS: number;
  durationS: number;
  shutterDelayS: number;
  /** The predicted signal at chip thickness `i · curveStepNm`, from 0 to 120 % of the target. */
  curve: { stepNm: number; signal: number[] };
  startSignal: number;
  cutSignal: number;
  /** Signal when the cut command goes out: the target less what grows during the shutter delay. */
  triggerSignal: number;
  /** Every extremum of the curve (0 to 120 %), chip thickness. */
  turningPoints: TurningPoint[];
  /** Extrema passed before the cut (a turning point at the target itself is not counted). */
  turningPointsBeforeCut: number;
  direction: 'rising' | 'falling' | 'turning';
  /** max − min of the signal from the start to the cut. */
  swing: number;
  slopePerNm: number;
  curvaturePerNm2: number;
  /** Expected rms thickness error of the cut on the parts, nm: the bound of the model fit (optical), or of the crystal or clock. */
  precisionNm: number;
  precisionPercent: number;
  /**
   * The same with the layers below it on the chip each as uncertain as its own noise bound (the
   * nearest six; finished layers as estimated): √(precision² + σ_below²), stack-precision.ts.
   * For a layer on a steep curve the chip below, not the noise, sets the limit.
   */
  stackPrecisionNm: number;
  stackPrecisionPercent: number;
  /** The bound on the material's index factor κ after this layer (the prior of its next optical layer; the prior itself for a layer not cut optically). */
  indexSigmaAfter: number;
  /** Same for the plain rule of the cut mode (crossing, or turn confirmed by 1σ), nm on the parts. */
  plainRulePrecisionNm: number;
  crystal: {
    /** This layer's thickness on the crystal, nm. */
    thicknessNm: number;
    startFrequencyHz: number;
    cutFrequencyHz: number;
    /** Fraction of the crystal's usable span used at the cut. */
    lifeUsed: number;
  };
  suggestion?: { wavelengthNm: number; precisionNm: number; precisionPercent: number };
  wholeRunWavelengthNm?: number;
  warnings: PlanWarning[];
}

export interface RunPlan {
  recipe: string;
  /** First layer planned (1, or the layer after the last achieved one). */
  fromLayer: number;
  layers: LayerPlan[];
  durationS: number;
  noise: number;
  sampleRateHz: number;
  wholeRun?: { changes: number; wavelengthsNm: number[] };
}

// A layer "ends on a turning point" when one lies within 0.05 % of its target: a turning-point
// cut stops at the turn, so anything looser moves the layer by more than a fit's precision
// (common practice, no source).
const TP_TARGET_TOLERANCE = 0.0005;

export function planRun(recipe: ResolvedRecipe, options: PlanOptions = {}): RunPlan {
  const noise = options.noise ?? recipe.monitor.noisePercent / 100;
  const sampleRateHz = options.sampleRateHz ?? recipe.monitor.sampleRateHz;
  const curveStep = options.curveStepNm ?? 0.1;
  const priors = options.priors ?? DEFAULT_PRIORS;
  const achieved = options.achievedNm ?? [];
  const fromLayer = achieved.length + 1;
  // Part thickness of every layer: achieved where known, else the design's.
  const partNm = recipe.layers.map((l, i) => (i < achieved.length ? (achieved[i] as number) : l.targetNm));
  const chipNm = partNm.map((t, i) => t * (recipe.layers[i] as LayerRecipe).chipRatio);

  const suggest = options.suggest ?? 'per-layer';
  const planned = recipe.layers.filter((l) => l.number >= fromLayer);
  const optical = planned.filter((l) => l.cutSetting !== 'crystal' && l.cutSetting !== 'time');
  const search =
    suggest === 'none' || optical.length === 0
      ? undefined
      : searchWavelengths(recipe, chipNm, optical.map((l) => l.number), {
          stepNm: options.searchStepNm ?? 1,
          noise,
          sampleRateHz,
          priors,
        });

  const crystalBelow: CrystalLayer[] = [];
  for (let i = 0; i < fromLayer - 1; i++) crystalBelow.push(crystalLayer(recipe.layers[i] as LayerRecipe, partNm[i] as number));
  const f0 = recipe.crystal.bareFrequencyHz;
  let fStart = stackFrequencyHz(f0, crystalBelow);

  const layers: LayerPlan[] = [];
  const monitors: ChipMonitor[] = [];
  const indexFactors = options.achievedIndexFactors ?? [];
  const scratch = new Float64Array(16);
  for (const layer of planned) {
    const i = layer.number - 1;
    const chip = recipe.chips[layer.chip] as ResolvedRecipe['chips'][number];
    const monitor = chipMonitorFor(recipe, i, partNm, { indexFactors });
    monitors.push(monitor);
    const target = chipNm[i] as number;
    const intervals = Math.max(2, Math.ceil(target / curveStep));
    const step = target / intervals;
    const curve = new Float64Array(Math.round(intervals * 1.2) + 1);
    for (let k = 0; k < curve.length; k++) curve[k] = monitor.signalAt(k * step);

    const chipRate = layer.rateNmPerS * layer.chipRatio;
    const crystal = crystalLayer(layer, partNm[i] as number);
    crystalBelow.push(crystal);
    const fCut = stackFrequencyHz(f0, crystalBelow);

    layers.push(
      describeLayer(recipe, layer, chip.label, i - chip.fromLayer + 2, monitor, curve, step, intervals, {
        noise,
        sampleRateHz,
        priors,
        chipRate,
        scratch,
        crystal: {
          thicknessNm: crystal.thicknessNm,
          startFrequencyHz: fStart,
          cutFrequencyHz: fCut,
          lifeUsed: crystalLifeUsed(f0, fCut, recipe.crystal.minUsableFrequencyHz),
        },
        search: search?.byLayer.get(layer.number),
      }),
    );
    fStart = fCut;
  }
  // The whole-run plan keeps a turning-point layer at its wavelength, as the per-layer suggestion does.
  const wholeRun =
    search && suggest === 'whole-run'
      ? wholeRunWavelengths(turnKeeping(search, layers), optical.map((l) => l.number), options.changePenalty ?? 0.05)
      : undefined;
  for (const l of layers) {
    const w = wholeRun?.byLayer.get(l.number);
    if (w !== undefined && (l.cut === 'level' || l.cut === 'turning-point')) l.wholeRunWavelengthNm = w;
  }
  const belowNm = new Map<number, number>();
  if (options.stackPrecision ?? true) addStackPrecision(recipe, layers, monitors, partNm, indexFactors, fromLayer, { noise, sampleRateHz, priors }, belowNm);
  for (const l of layers) warnIfImprecise(recipe, l, belowNm.get(l.number) ?? 0);
  return {
    recipe: recipe.name,
    fromLayer,
    layers,
    durationS: layers.reduce((sum, l) => sum + l.durationS, 0),
    noise,
    sampleRateHz,
    ...(wholeRun ? { wholeRun: { changes: wholeRun.changes, wavelengthsNm: wholeRun.wavelengthsNm } } : {}),
  };
}

export interface ChipViewOptions {
  /** n_true / n_design of the earlier layers, as estimated (default 1 each). */
  indexFactors?: readonly number[];
  /** The same for the growing layer (default 1). */
  growingIndexFactor?: number;
}

/**
 * The optical monitor's view of layer `index` (0-based) on its chip, with the chip's earlier
 * layers at the part thicknesses `partNm` (× their chip ratios) and, where given, their
 * estimated indices.
 */
export function chipMonitorFor(recipe: ResolvedRecipe, index: number, partNm: readonly number[], view: ChipViewOptions = {}): ChipMonitor {
  const layer = recipe.layers[index] as LayerRecipe;
  const chip = recipe.chips[layer.chip] as ResolvedRecipe['chips'][number];
  const factors = view.indexFactors ?? [];
  const below = [];
  for (let j = chip.fromLayer - 1; j < index; j++) {
    const l = recipe.layers[j] as LayerRecipe;
    below.push({ dispersion: scaledDispersion(l.dispersion, factors[j] ?? 1, 0), thicknessNm: (partNm[j] ?? l.targetNm) * l.chipRatio });
  }
  return layerMonitor(recipe, layer, below, scaledDispersion(layer.dispersion, view.growingIndexFactor ?? 1, 0));
}

/** The witness chip `layer` lies on, as every chip model takes it: the medium in front, the substrate and its back. */
export function chipFaces(recipe: ResolvedRecipe, layer: LayerRecipe): Pick<ChipMonitorSpec, 'incident' | 'substrate' | 'back' | 'substrateThicknessNm'> {
  const chip = recipe.chips[layer.chip] as ResolvedRecipe['chips'][number];
  return { incident: recipe.incident, substrate: chip.substrate, back: chip.back, substrateThicknessNm: chip.thicknessMm * 1e6 };
}

/**
 * The optical monitor of `layer` as its settings give it (wavelength, band, angle, signal), on its
 * chip over the layers `below` (chip thicknesses), the layer growing in `growing`: the one place
 * a layer's settings become a chip monitor, for the plan and for the virtual chamber's truth.
 */
export function layerMonitor(recipe: ResolvedRecipe, layer: LayerRecipe, below: ChipMonitorSpec['below'], growing: Dispersion): ChipMonitor {
  return buildChipMonitor({
    ...chipFaces(recipe, layer),
    below,
    growing,
    wavelengthNm: layer.wavelengthNm,
    bandwidthNm: layer.bandwidthNm,
    angleDeg: layer.angleDeg,
    signal: layer.signal,
  });
}

/**
 * Fills each planned layer's stackPrecisionNm: the fit's bound with the layer's index unknown
 * (its prior what the material's earlier layers left) and what the planned layers below it on
 * its chip bring, each counted with its own noise bound.
 */
function addStackPrecision(
  recipe: ResolvedRecipe,
  layers: LayerPlan[],
  monitors: readonly ChipMonitor[],
  partNm: readonly number[],
  indexFactors: readonly number[],
  fromLayer: number,
  ctx: { noise: number; sampleRateHz: number; priors: FitPriors },
  /** Filled with what the layers below bring to each layer's figure, nm on the parts. */
  belowNmOut: Map<number, number>,
): void {
  // A layer below counts with its own noise bound, not its stack figure: the chip refit fits
  // each layer below from the readings of the layers above it too, so that their errors do
  // not compound (compounding them overstated the edge filter's first chip up to tenfold).
  const sigmaChipNm = new Map<number, number>();
  const indexSigma = new Map<string, number>();
  layers.forEach((plan, n) => {
    const i = plan.number - 1;
    const layer = recipe.layers[i] as LayerRecipe;
    const below = stackFigure(recipe, plan, monitors[n] as ChipMonitor, partNm, indexFactors, fromLayer, ctx, (k) => sigmaChipNm.get(k) ?? 0, indexSigma.get(layer.materialName));
    if (below !== undefined) belowNmOut.set(plan.number, below);
    if (plan.cut === 'level' || plan.cut === 'turning-point') indexSigma.set(layer.materialName, plan.indexSigmaAfter);
    sigmaChipNm.set(i, plan.precisionNm * layer.chipRatio);
  });
}

/**
 * Fills one layer's stack figure (and the bound on its index after it): the fit's bound with
 * the layer's index unknown (prior `indexPrior`, the bound the material's earlier layers left;
 * none yet: the design's) and what the planned layers below it on its chip bring, each with the
 * chip-nm uncertainty `sigmaChipNmOf(k)` (0-based). Returns what the layers below bring, nm on
 * the parts (undefined for a layer not cut optically).
 */
function stackFigure(
  recipe: ResolvedRecipe,
  plan: LayerPlan,
  monitor: ChipMonitor,
  partNm: readonly number[],
  indexFactors: readonly number[],
  fromLayer: number,
  ctx: { noise: number; sampleRateHz: number; priors: FitPriors },
  sigmaChipNmOf: (index: number) => number,
  indexPrior: number | undefined,
): number | undefined {
  const i = plan.number - 1;
  const layer = recipe.layers[i] as LayerRecipe;
  const chip = recipe.chips[layer.chip] as ResolvedRecipe['chips'][number];
  let total = plan.precisionNm;
  let belowNm: number | undefined;
  const prior = indexPrior === undefined ? DEFAULT_INDEX_SIGMA : Math.hypot(indexPrior, INDEX_RUN_SIGMA);
  plan.indexSigmaAfter = prior;
  if (plan.cut === 'level' || plan.cut === 'turning-point') {
    const below: BelowLayer[] = [];
    for (let k = Math.max(chip.fromLayer - 1, i - NEAREST, fromLayer - 1); k < i; k++) {
      const sigma = sigmaChipNmOf(k);
      if (!(sigma > 0)) continue;
      const lower = recipe.layers[k] as LayerRecipe;
      const deltaChipNm = 0.5;
      const perturbed = partNm.slice();
      perturbed[k] = (partNm[k] as number) + deltaChipNm / lower.chipRatio;
      below.push({ monitor: chipMonitorFor(recipe, i, perturbed, { indexFactors }), deltaNm: deltaChipNm, sigmaNm: sigma });
    }
    const delta = 0.01;
    const index = {
      plus: chipMonitorFor(recipe, i, partNm, { indexFactors, growingIndexFactor: 1 + delta }),
      minus: chipMonitorFor(recipe, i, partNm, { indexFactors, growingIndexFactor: 1 - delta }),
      delta,
      sigma: prior,
    };
    const p = layerPrecision(monitor, index, below, plan.chipTargetNm, layer.rateNmPerS * layer.chipRatio, ctx.sampleRateHz, ctx.noise, ctx.priors);
    plan.indexSigmaAfter = p.indexSigma;
    if (Number.isFinite(p.cutNm) && Number.isFinite(p.belowNm)) {
      total = Math.max(plan.precisionNm, Math.hypot(p.cutNm, p.belowNm) / layer.chipRatio);
      belowNm = p.belowNm / layer.chipRatio;
    }
  }
  plan.stackPrecisionNm = total;
  plan.stackPrecisionPercent = (100 * total) / layer.targetNm;
  return belowNm;
}

/**
 * Layer `number` planned again in `recipe` (whose other layers `plan` holds, as planned from
 * layer 1 with the stack figure), with its stack figure from the layers below as `plan` has
 * them: what one layer's cut, wavelength or chip would give, at the cost of one layer. No
 * wavelength search; the warnings are the layer's own.
 */
export function planLayerAgain(recipe: ResolvedRecipe, plan: RunPlan, number: number, options: Pick<PlanOptions, 'priors' | 'curveStepNm'> = {}): LayerPlan {
  if (plan.fromLayer !== 1) throw new RangeError('planLayerAgain needs a plan from layer 1');
  const i = number - 1;
  const layer = recipe.layers[i] as LayerRecipe;
  const chip = recipe.chips[layer.chip] as ResolvedRecipe['chips'][number];
  const old = plan.layers[i] as LayerPlan;
  const priors = options.priors ?? DEFAULT_PRIORS;
  const partNm = recipe.layers.map((l) => l.targetNm);
  const monitor = chipMonitorFor(recipe, i, partNm);
  const target = old.chipTargetNm;
  const curveStep = options.curveStepNm ?? 0.1;
  const intervals = Math.max(2, Math.ceil(target / curveStep));
  const step = target / intervals;
  const curve = new Float64Array(Math.round(intervals * 1.2) + 1);
  for (let k = 0; k < curve.length; k++) curve[k] = monitor.signalAt(k * step);
  const ctx = { noise: plan.noise, sampleRateHz: plan.sampleRateHz, priors };
  const again = describeLayer(recipe, layer, chip.label, i - chip.fromLayer + 2, monitor, curve, step, intervals, {
    ...ctx,
    chipRate: layer.rateNmPerS * layer.chipRatio,
    scratch: new Float64Array(16),
    crystal: old.crystal,
    search: undefined,
  });
  let indexPrior: number | undefined;
  for (let k = i - 1; k >= 0 && indexPrior === undefined; k--) {
    const below = plan.layers[k] as LayerPlan;
    if (below.material === layer.materialName && (below.cut === 'level' || below.cut === 'turning-point')) indexPrior = below.indexSigmaAfter;
  }
  const sigmaOf = (k: number): number => ((plan.layers[k] as LayerPlan).precisionNm * (recipe.layers[k] as LayerRecipe).chipRatio);
  const belowNm = stackFigure(recipe, again, monitor, partNm, [], 1, ctx, sigmaOf, indexPrior);
  warnIfImprecise(recipe, again, belowNm ?? 0);
  return again;
}

function crystalLayer(layer: LayerRecipe, partNm: number): CrystalLayer {
  return { thicknessNm: partNm / layer.toolingFactor, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio };
}

interface DescribeContext {
  noise: number;
  sampleRateHz: number;
  priors: FitPriors;
  chipRate: number;
  scratch: Float64Array;
  crystal: LayerPlan['crystal'];
  search: LayerSearch | undefined;
}

function describeLayer(
  recipe: ResolvedRecipe,
  layer: LayerRecipe,
  chipLabel: string,
  layerOnChip: number,
  monitor: ChipMonitor,
  curve: Float64Array,
  step: number,
  cutIndex: number,
  ctx: DescribeContext,
): LayerPlan {
  const target = cutIndex * step;
  const turningPoints = findTurningPoints(monitor, curve, step);
  const nearTarget = turningPoints.find((tp) => Math.abs(tp.thicknessNm - target) <= TP_TARGET_TOLERANCE * target);
  const cut: CutMode =
    layer.cutSetting === 'auto' ? (nearTarget ? 'turning-point' : 'level') : layer.cutSetting;

  // Derivatives at the cut from the exact curve: central differences, h chosen so that
  // truncation (∝ h²) and rounding (∝ ε/h, ε/h²) errors are both far below what is reported.
  const h1 = 1e-3;
  const h2 = 0.5;
  const slopePerNm = (monitor.signalAt(target + h1) - monitor.signalAt(target - h1)) / (2 * h1);
  const s0 = curve[cutIndex] as number;
  const curvaturePerNm2 = (monitor.signalAt(target + h2) - 2 * s0 + monitor.signalAt(target - h2)) / (h2 * h2);
  let lo = Number.POSITIVE_INFINITY;
  let hi = Number.NEGATIVE_INFINITY;
  for (let k = 0; k <= cutIndex; k++) {
    const v = curve[k] as number;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  const swing = hi - lo;
  const startSignal = curve[0] as number;
  const triggerSignal = monitor.signalAt(Math.max(0, target - ctx.chipRate * layer.shutterDelayS));
  const slopeScale = swing > 0 ? swing / target : 1;
  const direction: LayerPlan['direction'] =
    Math.abs(slopePerNm) < 1e-3 * slopeScale ? 'turning' : slopePerNm > 0 ? 'rising' : 'falling';

  const ratio = layer.chipRatio;
  let precisionChip: number;
  let plainChip: number;
  if (cut === 'crystal' || cut === 'time') {
    const part = cut === 'crystal' ? crystalPrecisionNm(recipe, layer, ctx.crystal) : ctx.priors.rateSigmaFraction * layer.targetNm;
    precisionChip = part * ratio;
    plainChip = precisionChip;
  } else {
    precisionChip = fitPrecisionBound(curve, cutIndex + 1, step, ctx.chipRate, ctx.sampleRateHz, ctx.noise, ctx.priors, ctx.scratch);
    plainChip =
      cut === 'level' ? levelRulePrecision(ctx.noise, slopePerNm) : turningPointRulePrecision(ctx.noise, curvaturePerNm2);
  }
  const precisionNm = precisionChip / ratio;
  const turningPointsBeforeCut = turningPoints.filter((tp) => tp.thicknessNm < target && tp !== nearTarget).length;

  const warnings: PlanWarning[] = [];
  const warn = (code: PlanWarningCode, message: string): void => {
    warnings.push({ code, message });
  };
  const [mLo, mHi] = recipe.monitor.rangeNm;
  const optical = cut === 'level' || cut === 'turning-point';
  // A turning-point layer keeps its wavelength: cut on the turn, it corrects the errors of the
  // layers below at the wavelength the design is monitored for (self-compensation), which the
  // search's noise-only figure does not see; elsewhere its target would not even be a turn.
  const best =
    !ctx.search || !optical
      ? undefined
      : cut === 'turning-point'
        ? { wavelengthNm: layer.wavelengthNm, bestPercent: (100 * precisionNm) / layer.targetNm }
        : { wavelengthNm: ctx.search.wavelengthNm, bestPercent: ctx.search.bestPercent };
  // What a warning can offer: another wavelength the search found (named only when it is another one).
  const elsewhere = best && best.wavelengthNm !== layer.wavelengthNm ? `monitor at ${best.wavelengthNm} nm (the search's best)` : 'monitor at another wavelength';
  if (layer.wavelengthNm < mLo || layer.wavelengthNm > mHi) {
    warn('wavelength-outside-monitor', `${layer.wavelengthNm} nm is outside the monitor's range ${mLo}–${mHi} nm: choose a wavelength within it, or cut the layer on the crystal`);
  }
  if (optical) {
    const quarterWave = layer.wavelengthNm / (4 * nearestIndex(monitor));
    const closest = turningPoints.reduce((best, tp) => Math.min(best, Math.abs(tp.thicknessNm - target)), Number.POSITIVE_INFINITY);
    if (cut === 'level' && closest < 0.1 * quarterWave) {
      warn(
        'trigger-near-turning-point',
        `the level cut lies ${closest.toFixed(2)} nm from a turning point, where the signal is nearly flat and a level crossing is slow to show, so noise moves the cut; this concerns the plain rule (the model fit uses the whole curve); for the plain rule, ${elsewhere} or cut on the turning point`,
      );
    }
    if (cut === 'turning-point' && !nearTarget) {
      const next = turningPoints.find((tp) => tp.thicknessNm > 0.5 * target);
      warn(
        'no-turning-point-at-target',
        next
          ? `the layer does not end on a turning point at ${layer.wavelengthNm} nm; a turning-point cut would stop at ${(next.thicknessNm / ratio).toFixed(2)} nm instead of ${layer.targetNm.toFixed(2)} nm: cut on a level, or choose a wavelength where the layer ends on a turning point`
          : `the signal has no turning point near the target at ${layer.wavelengthNm} nm: cut on a level, or choose a wavelength where the layer ends on a turning point`,
      );
    }
    if (swing < Math.max(0.01, 10 * ctx.noise) && turningPoints.length > 0) {
      warn('small-swing', `the signal swings by ${(swing * 100).toFixed(2)} % only: ${elsewhere}, start a fresh chip, or cut on the crystal`);
    }
    if (Math.abs((curve[cutIndex] as number) - startSignal) < 5 * ctx.noise && turningPointsBeforeCut === 0 && cut === 'level') {
      warn('too-thin', `the signal changes by ${(Math.abs(s0 - startSignal) * 100).toFixed(3)} % over the layer: too little to cut on; cut it on the crystal, or ${elsewhere}`);
    }
  }
  if (ctx.crystal.lifeUsed >= 1) warn('crystal-spent', 'the crystal reaches the end of its usable life during this layer: change the crystal before it');

  const plan: LayerPlan = {
    number: layer.number,
    material: layer.materialName,
    chip: chipLabel,
    layerOnChip,
    cut,
    targetNm: layer.targetNm,
    chipTargetNm: target,
    wavelengthNm: layer.wavelengthNm,
    signal: layer.signal,
    angleDeg: layer.angleDeg,
    bandwidthNm: layer.bandwidthNm,
    rateNmPerS: layer.rateNmPerS,
    durationS: layer.targetNm / layer.rateNmPerS,
    shutterDelayS: layer.shutterDelayS,
    curve: { stepNm: step, signal: Array.from(curve) },
    startSignal,
    cutSignal: s0,
    triggerSignal,
    turningPoints,
    turningPointsBeforeCut,
    direction,
    swing,
    slopePerNm,
    curvaturePerNm2,
    precisionNm,
    precisionPercent: (100 * precisionNm) / layer.targetNm,
    // Filled in once every layer is planned (addStackPrecision).
    stackPrecisionNm: precisionNm,
    stackPrecisionPercent: (100 * precisionNm) / layer.targetNm,
    indexSigmaAfter: DEFAULT_INDEX_SIGMA,
    plainRulePrecisionNm: plainChip / ratio,
    crystal: ctx.crystal,
    warnings,
  };
  if (best) {
    plan.suggestion = {
      wavelengthNm: best.wavelengthNm,
      precisionPercent: best.bestPercent,
      precisionNm: (best.bestPercent * layer.targetNm) / 100,
    };
  }
  return plan;
}

/**
 * The search with every turning-point layer held at its own wavelength: its row keeps only that
 * grid wavelength (the layer leaves the whole-run plan when the grid does not hold it).
 */
function turnKeeping(search: WavelengthSearch, layers: readonly LayerPlan[]): WavelengthSearch {
  const byLayer = new Map(search.byLayer);
  for (const l of layers) {
    const row = byLayer.get(l.number);
    if (!row || l.cut !== 'turning-point') continue;
    const own = search.gridNm.findIndex((w) => Math.abs(w - l.wavelengthNm) < 1e-9);
    if (own < 0 || !Number.isFinite(row.precisionPercent[own])) {
      byLayer.delete(l.number);
      continue;
    }
    byLayer.set(l.number, { ...row, precisionPercent: row.precisionPercent.map((p, w) => (w === own ? p : Number.POSITIVE_INFINITY)) });
  }
  return { gridNm: search.gridNm, byLayer };
}

/**
 * The `imprecise-cut` warning, judged on the stack figure (the layers below uncertain): an
 * optical cut should do better than 1 %, a crystal cut than 1.5× its tooling uncertainty. It
 * says what would do better: a fresh chip when the layers below set the limit, the crystal when
 * it would, another wavelength when the search found one.
 */
function warnIfImprecise(recipe: ResolvedRecipe, plan: LayerPlan, belowNm: number): void {
  const layer = recipe.layers[plan.number - 1] as LayerRecipe;
  const optical = plan.cut === 'level' || plan.cut === 'turning-point';
  const acceptable = optical ? 0.01 : Math.max(0.01, (1.5 * recipe.crystal.toolingSigmaPercent) / 100);
  if (!(plan.stackPrecisionNm > acceptable * plan.targetNm)) return;
  const pct = (nm: number): string => `${((100 * nm) / plan.targetNm).toFixed(2)} %`;
  const advice: string[] = [];
  if (optical) {
    if (belowNm > plan.precisionNm) advice.push(`start a fresh chip at this layer (the layers below bring ${pct(belowNm)})`);
    const crystalNm = crystalPrecisionNm(recipe, layer, plan.crystal);
    if (crystalNm < plan.stackPrecisionNm) advice.push(`cut it on the crystal (${pct(crystalNm)})`);
    if (plan.suggestion && plan.suggestion.wavelengthNm !== plan.wavelengthNm && plan.suggestion.precisionNm < plan.precisionNm) {
      advice.push(`monitor at ${plan.suggestion.wavelengthNm} nm (${plan.suggestion.precisionPercent.toFixed(2)} % from noise alone; plan it again there for the stack figure)`);
    }
    if (advice.length === 0) advice.push('no other cut the plan knows does better: a slower rate or a quieter monitor would');
  } else {
    advice.push(`calibrate the tooling factor (known to ${recipe.crystal.toolingSigmaPercent} %) or monitor the layer optically`);
  }
  const noise = plan.stackPrecisionNm > plan.precisionNm ? ` (${pct(plan.precisionNm)} from noise alone)` : '';
  plan.warnings.push({
    code: 'imprecise-cut',
    message: `the expected precision with the layers below is ${pct(plan.stackPrecisionNm)} of the thickness${noise}: ${advice.join('; or ')}`,
  });
}

/** The growing layer's real index at the monitor wavelength; it only sizes a warning threshold. */
function nearestIndex(monitor: ChipMonitor): number {
  return indexAt({ n: 0, k: 0 }, monitor.spec.growing, monitor.spec.wavelengthNm).n;
}

/**
 * A crystal cut's precision on the parts: one frequency reading's noise over the slope of
 * frequency against crystal thickness, times the tooling factor, added in quadrature to the
 * tooling factor's own uncertainty (which usually dominates).
 */
function crystalPrecisionNm(recipe: ResolvedRecipe, layer: LayerRecipe, crystal: LayerPlan['crystal']): number {
  const hz = crystal.startFrequencyHz - crystal.cutFrequencyHz;
  const slopeHzPerNm = crystal.thicknessNm > 0 ? hz / crystal.thicknessNm : Number.NaN;
  const reading = (recipe.crystal.noiseHz / slopeHzPerNm) * layer.toolingFactor;
  const tooling = (recipe.crystal.toolingSigmaPercent / 100) * layer.targetNm;
  return Math.hypot(reading, tooling);
}
