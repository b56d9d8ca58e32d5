/**
 * The one interface every cut rule and estimator of a layer speaks to the controller. A part
 * keeps whatever it watches as plain data (its `Own`: a turn detector, a calibration, a fit),
 * which the controller holds in its state and hands back; the part itself is a pair of pure
 * functions of that and of the layer's present, so the reducer stays pure and a replay decides
 * as the run did.
 */
import type { LayerPlan } from '../../model/plan/plan.ts';
import type { CutMode, ResolvedRecipe } from '../../model/plan/recipe.ts';
import type { AlertCode } from '../codes.ts';
import type { CutReason } from '../events.ts';

export type RecipeLayer = ResolvedRecipe['layers'][number];

/**
 * The layer at the present instant, as the controller sees it for every rule: what the plan and
 * the recipe fix for the layer, and its growth as the crystal tells it (the clock's at the
 * planned rate where the crystal is silent).
 */
export interface LayerNow {
  /** The layer's plan: targets (part and chip), trigger level, swing, turning points, duration, precision. */
  readonly plan: LayerPlan;
  /** The layer's recipe: planned rate, shutter delay, tooling, chip ratio, overshoot. */
  readonly layer: RecipeLayer;
  /** The mode the layer is cut in now (its planned one, or a fallback). */
  readonly mode: CutMode;
  /** The optical monitor's readings per second (a fit cuts at the reading nearest the instant). */
  readonly sampleRateHz: number;
  readonly nowS: number;
  /** Since the shutter opened, s. */
  readonly elapsedS: number;
  /** The crystal's part thickness, nm, or the planned rate's over the elapsed time where it is silent. */
  readonly thicknessNm: number;
  /** The crystal's part thickness as last read, silent or not (NaN before its first reading). */
  readonly crystalNm: number;
  /** The crystal's rate, nm/s, or the planned one where it is silent or has none yet. */
  readonly rateNmPerS: number;
  /** What grows during the shutter's delay at that rate, nm. */
  readonly delayNm: number;
  /** The crystal (or the clock) says enough has grown for an optical cut (armFraction of the target). */
  readonly armed: boolean;
  readonly crystalSilent: boolean;
}

/** A part's estimate of the layer's part thickness, nm, and its rms, nm. */
export interface ThicknessEstimate {
  readonly thicknessNm: number;
  readonly sigmaNm: number;
}

/** A rule's decision to cut now, and what the cut records. */
export interface Cut {
  readonly reason: CutReason;
  /** The layer's part thickness expected once the shutter has closed, nm (the cut event's). */
  readonly estimatedNm: number;
  /** What the shutter's delay was allowed, nm. */
  readonly delayAllowanceNm: number;
  /** What the layer is recorded at for the chip model, nm (usually estimatedNm). */
  readonly recordedNm: number;
  /** A cut that is an alarm (a guard rail) says so. */
  readonly alert?: { readonly code: AlertCode; readonly message: string };
}

/**
 * A cut rule or estimator, judging the layer from what it watches (`own`) and the layer's
 * present. Both functions are pure and cheap enough to call at every reading.
 */
export interface CutRule<Own> {
  /** Its estimate of the layer's part thickness now, with its rms; null when it has none. */
  estimate(own: Own, now: LayerNow): ThicknessEstimate | null;
  /** Cut now (and what to record), or null: not yet. */
  decide(own: Own, now: LayerNow): Cut | null;
}

/** A cut whose recorded thickness is its estimate. */
export function cutAt(reason: CutReason, estimatedNm: number, delayAllowanceNm: number, recordedNm = estimatedNm): Cut {
  return { reason, estimatedNm, delayAllowanceNm, recordedNm };
}

/**
 * The plain rules' estimate: the crystal's (or the clock's) thickness, with the plan's precision
 * of the plain rule of the layer's planned mode as its rms.
 */
export function plainEstimate(_own: unknown, now: LayerNow): ThicknessEstimate {
  return { thicknessNm: now.thicknessNm, sigmaNm: now.plan.plainRulePrecisionNm };
}
