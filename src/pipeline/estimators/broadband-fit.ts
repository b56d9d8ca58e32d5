/**
 * The broadband fit as a part of the controller (estimator `broadband`, not wired yet): a
 * spectrum per reading fitted with the chip's exact model (src/model/estimate/broadband-fit.ts),
 * on the fit's clock as the single-wavelength fit keeps it (`fitClockAt`: the crystal's part
 * thickness over the planned rate, or elapsed time), cutting when the fitted thickness one
 * shutter delay ahead reaches the chip target.
 *
 * Like the model fit, the filter is an object owned by the layer whose state moves in place; the
 * reducer never branches on an old state.
 */
import { buildBroadbandChip, createBroadbandFit, type BroadbandFit, type SpectrumMerit } from '../../model/estimate/index.ts';
import { broadbandChipFor, planBroadbandLayer, type BroadbandLayerPlan } from '../../model/plan/broadband-plan.ts';
import { DEFAULT_PRIORS } from '../../model/plan/precision.ts';
import type { ResolvedRecipe } from '../../model/plan/recipe.ts';
import { INDEX_RUN_SIGMA } from '../../model/plan/stack-precision.ts';
import { cutAt, type CutRule, type RecipeLayer, type ThicknessEstimate } from '../rules/cut-rule.ts';
import { CLOCK_START_SIGMA_NM, RATE_RUN_SIGMA, type FitStart } from './model-fit.ts';

/**
 * The alert the controller raises when a layer's spectra depart from the model beyond the noise
 * (SpectrumMerit.alertDue). Not yet in the registry (src/pipeline/codes.ts): adding it there is the
 * union member and its entry, done with the wiring.
 */
export const SPECTRUM_DEPARTS = {
  code: 'spectrum-departs',
  severity: 'warning',
  sentence: 'The measured spectra depart from the chip’s model by more than the noise: the chip below, the index or the monitor is not as the run believes.',
} as const;

export interface BroadbandRun {
  readonly fit: BroadbandFit;
  readonly plan: BroadbandLayerPlan;
  readonly clock: 'crystal' | 'time';
}

/** The filter and its clock at the present instant: what the broadband rule judges (its `Own`). */
export interface BroadbandNow {
  readonly run: BroadbandRun;
  readonly clockS: number;
}

/** What a broadband fit of a layer about to start needs: the model fit's start, with the instrument's grid. */
export interface BroadbandStart extends FitStart {
  /** The instrument's wavelengths, nm (its configuration or its first frame). */
  readonly wavelengthsNm: Float64Array;
  /** rms of one value per wavelength (fraction). */
  readonly noise: number;
  /** Spectra per second. */
  readonly sampleRateHz: number;
  /** rms of the finished layers' chip thickness (deposition order), for the plan's bound; absent: exact. */
  readonly belowSigmaNm?: readonly number[];
}

/**
 * A broadband fit for the layer about to start: the chip as the estimates left it computed once,
 * the plan's window, and the priors of the material's index and rate from its earlier layers (as
 * `startFit`; the gain is not carried over, for the same reason).
 */
export function startBroadband(start: BroadbandStart, clock: 'crystal' | 'time'): BroadbandRun {
  const { recipe, index, plan } = start;
  const layer = recipe.layers[index] as RecipeLayer;
  const chipSpec = broadbandChipFor(recipe, index, start.stack.partNm, { indexFactors: start.stack.indexFactors });
  const chipOffset = (recipe.chips[layer.chip] as ResolvedRecipe['chips'][number]).fromLayer - 1;
  const known = start.materialIndex[layer.materialName];
  const rateKnown = clock === 'crystal' ? start.materialRate[layer.materialName] : undefined;
  const rateNmPerS = layer.rateNmPerS * layer.chipRatio * (rateKnown?.factor ?? 1);
  const priors = {
    rateSigmaFraction: rateKnown ? Math.hypot(rateKnown.sigma / rateKnown.factor, RATE_RUN_SIGMA) : DEFAULT_PRIORS.rateSigmaFraction,
    indexSigma: known ? Math.hypot(known.sigma, INDEX_RUN_SIGMA) : start.indexSigma,
    gainSigma: DEFAULT_PRIORS.gainSigma,
    offsetSigma: DEFAULT_PRIORS.offsetSigma,
    ...(clock === 'crystal' ? { startSigmaNm: CLOCK_START_SIGMA_NM } : {}),
  };
  const layerPlan = planBroadbandLayer({
    chip: chipSpec,
    wavelengthsNm: start.wavelengthsNm,
    targetNm: plan.chipTargetNm,
    rateNmPerS,
    sampleRateHz: start.sampleRateHz,
    shutterDelayS: layer.shutterDelayS,
    noise: start.noise,
    ...priors,
    ...(start.belowSigmaNm ? { belowSigmaNm: start.belowSigmaNm.slice(chipOffset, index) } : {}),
  });
  const fit = createBroadbandFit({
    chip: buildBroadbandChip(chipSpec, start.wavelengthsNm),
    use: layerPlan.window.use,
    noise: start.noise,
    targetNm: plan.chipTargetNm,
    rateNmPerS,
    ...priors,
    indexFactor: known?.factor ?? 1,
  });
  return { fit, plan: layerPlan, clock };
}

/**
 * Takes a spectrum at the fit's clock `clockS`. Its merit, or null where the spectrum was not
 * used (its grid is not the instrument's: a fault for the channel). `alertDue` on the merit is
 * the controller's cue for {@link SPECTRUM_DEPARTS}.
 */
export function readBroadband(run: BroadbandRun, wavelengthsNm: Float64Array, values: Float64Array, clockS: number): SpectrumMerit | null {
  return sameGrid(run.fit, wavelengthsNm) ? run.fit.read(values, clockS) : null;
}

function sameGrid(fit: BroadbandFit, wavelengthsNm: Float64Array): boolean {
  const grid = fit.wavelengthsNm;
  if (grid === wavelengthsNm) return true;
  if (grid.length !== wavelengthsNm.length) return false;
  for (let w = 0; w < grid.length; w++) if (grid[w] !== wavelengthsNm[w]) return false;
  return true;
}

/** Part thickness at the design index (u, what the cut compares with the target) and its rms; null before 3 spectra. */
function broadbandThickness(run: BroadbandRun, clockS: number, layer: RecipeLayer): ThicknessEstimate | null {
  const e = run.fit.estimate(clockS);
  if (e.spectra < 3 || !Number.isFinite(e.thicknessNm) || !Number.isFinite(e.sigmaNm)) return null;
  return { thicknessNm: e.thicknessNm / layer.chipRatio, sigmaNm: e.sigmaNm / layer.chipRatio };
}

/**
 * The broadband cut: when the fitted thickness, one shutter delay on, reaches the chip target, at
 * the spectrum nearest that instant (up to half a spectrum early), once armed. Its clock runs at
 * the crystal's rate over the planned one (1 on the time clock). It records the physical
 * thickness u/κ, as the model fit does.
 */
export const broadbandRule: CutRule<BroadbandNow> = {
  estimate: ({ run, clockS }, now) => broadbandThickness(run, clockS, now.layer),
  decide({ run, clockS }, now) {
    const { layer, plan } = now;
    const clockRate = run.clock === 'crystal' ? now.rateNmPerS / layer.rateNmPerS : 1;
    const delayClock = layer.shutterDelayS * clockRate;
    const cutClock = run.fit.cutTimeS(plan.chipTargetNm, delayClock);
    const halfStep = (0.5 * clockRate) / now.sampleRateHz;
    if (!(now.armed && clockS + halfStep >= cutClock)) return null;
    const est = run.fit.estimate(Math.max(clockS, cutClock) + delayClock);
    return cutAt('model-fit', est.physicalNm / layer.chipRatio, now.delayNm);
  },
};
