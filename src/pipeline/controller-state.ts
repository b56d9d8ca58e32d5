/**
 * The controller's state: plain data, a new value per step (the model fit's reading buffers
 * aside, see {@link ControllerState.fit}), and the few helpers every part of the controller reads
 * it with.
 */
import type { CrystalLayer } from '../model/crystal/index.ts';
import type { RefitLayer } from '../model/estimate/index.ts';
import type { LayerPlan, RunPlan } from '../model/plan/plan.ts';
import type { CutMode, ResolvedRecipe } from '../model/plan/recipe.ts';
import type { FitRun, MaterialEstimate } from './estimators/model-fit.ts';
import type { TurnDetector } from './estimators/turn-detector.ts';
import type { FaultCode } from './types.ts';
import type { RecipeLayer } from './rules/cut-rule.ts';

/**
 * Implausible readings in a row, on one channel, that are the instrument's and not a line's
 * (half a second at 10 Hz): a clock that jumped and stays, a crystal changed, or an instrument
 * set aside for the layer.
 */
export const SUSPECT_READINGS = 5;

/** `awaiting-close`: a layer has ended and the next (or the run's end) waits for a shutter's close to be confirmed. */
export type Phase = 'ready' | 'depositing' | 'closing' | 'holding' | 'awaiting-close' | 'finished' | 'aborted';

/** The optical monitor's channel within the layer: its last value, its unbroken run of readings, its plausibility. */
export interface OpticalTrack {
  readonly value: number;
  /** Start of the present unbroken run of readings (gaps under staleAfterS), and where the gap before it began. */
  readonly since: number;
  readonly gapFromS: number;
  /** Twice the range of the layer's planned curve: a jump beyond it (and 20σ) is implausible. */
  readonly jumpLimit: number;
  /**
   * Consecutive implausible readings, the last of them, and whether they jumped among themselves
   * too; at SUSPECT_READINGS, readings that agree are the signal's new level, erratic ones set the
   * monitor aside for the layer.
   */
  readonly suspects: number;
  readonly suspectValue: number;
  readonly erratic: boolean;
  readonly distrusted: boolean;
  /** The present run of readings has been alerted as a monitor back too late to take its layer back from the crystal. */
  readonly backTooLateSaid: boolean;
}

export interface CrystalTrack {
  readonly lastS: number;
  readonly frequencyHz: number;
  /** This layer's thickness on the parts from the crystal, nm (NaN before the first reading). */
  readonly partNm: number;
  readonly rateNmPerS: number;
  /** Start of the present unbroken run of accepted readings. */
  readonly since: number;
  /** Implausible readings in a row, or null. */
  readonly suspect: CrystalSuspect | null;
  /** The layer for which the crystal is set aside (its readings jumped as no deposition can), or −1. */
  readonly distrustLayer: number;
}

export interface CrystalSuspect {
  readonly count: number;
  readonly firstHz: number;
  readonly firstS: number;
  readonly lastHz: number;
  readonly lastS: number;
  /** Every one of them a rise to near a fresh crystal's frequency. */
  readonly fresh: boolean;
}

/**
 * The crystal in use: its bare frequency and the layers on it. A fresh crystal mid-run starts a
 * new one: the finished layers' records (crystalBelow) stay, the crystal's own stack restarts
 * empty, and the layer growing at the change carries what it had grown on the old one.
 */
export interface CrystalUnit {
  readonly referenceHz: number;
  readonly stack: readonly CrystalLayer[];
  /** The layer growing when this crystal came into use (−1 for the first), and its crystal nm until then. */
  readonly layer: number;
  readonly carriedNm: number;
}

/**
 * A channel's clock: the offset it was re-based by, and the time-jumped readings in a row (the
 * last one's time, the first one's and the run clock's present when it came).
 */
export interface ChannelClock {
  readonly offsetS: number;
  readonly streak: number;
  readonly lastS: number;
  readonly firstS: number;
  readonly presentS: number;
}

/** What the alerts have said of a fault code: how many they counted, when the last went out, since when more came. */
export interface FaultReport {
  readonly reported: number;
  readonly alertedS: number;
  readonly sinceS: number;
}

/** Each material's estimates as a layer left them. */
export type MaterialEstimates = Readonly<Record<string, MaterialEstimate>>;

export interface ControllerState {
  readonly phase: Phase;
  readonly phaseBeforeHold: Phase;
  /** 0-based index of the current layer. */
  readonly index: number;
  readonly plan: RunPlan;
  readonly nowS: number;
  readonly openedAtS: number;
  readonly cutAtS: number;
  readonly mode: CutMode;
  readonly optical: OpticalTrack;
  /** The plain rules' turn detector on the layer's optical signal. */
  readonly turns: TurnDetector;
  readonly crystal: CrystalTrack;
  /** Crystal thickness of each finished layer as the crystal saw it, nm (whichever crystals it grew on). */
  readonly crystalBelow: readonly CrystalLayer[];
  readonly crystalUnit: CrystalUnit;
  /** Each channel's clock offset (an instrument whose clock jumped, re-based). */
  readonly clocks: { readonly optical: ChannelClock; readonly crystal: ChannelClock };
  /** Estimated part thickness of each finished layer, nm. */
  readonly achievedNm: readonly number[];
  /**
   * Estimated n_true / n_design of each finished layer: the fit's; NaN where the layer was not
   * fitted (cut on the crystal, say), whose index is then its material's as estimated so far.
   */
  readonly indexFactors: readonly number[];
  /**
   * For a layer not cut by the fit but watched by it (cut on the crystal): the optical thickness
   * the fit saw, as part nm at the design index; NaN otherwise. Stands for the layer's optical
   * thickness until its material's rate on the crystal's clock is known (see resolvedStack).
   */
  readonly opticalNm: readonly number[];
  /** Each material's index over the design's as its fitted layers so far showed it, with its rms. */
  readonly materialIndex: MaterialEstimates;
  /**
   * Each material's chip growth in u per second of the crystal clock over the planned chip rate,
   * with its rms, as its fitted layers showed it: the crystal's tooling, the chip ratio and the
   * index in one figure, the same for every layer of the material.
   */
  readonly materialRate: MaterialEstimates;
  /** The current chip's last REFIT_LAYERS finished layers watched on the crystal's clock, binned, for the chip refit. */
  readonly chipRecords: readonly RefitLayer[];
  /**
   * The material estimates as each finished layer left them: the refit of a window of layers
   * starts from those its first layer found, which owe nothing to the window's own readings.
   */
  readonly materialAfter: readonly { readonly rate: MaterialEstimates; readonly index: MaterialEstimates }[];
  readonly approachingSent: boolean;
  readonly rateAlerted: boolean;
  readonly crystalAlerted: boolean;
  readonly openAlerts: readonly string[];
  readonly alertCount: number;
  /** Exact count of every fault code; the alerts report them, thinned (FAULT_SUMMARY_S). */
  readonly faults: Readonly<Partial<Record<FaultCode, number>>>;
  readonly faultReports: Readonly<Partial<Record<FaultCode, FaultReport>>>;
  /** When the next summary of faults not yet reported is due (Infinity: none waiting). */
  readonly faultsDueS: number;
  readonly lastOpticalS: number;
  readonly lastCrystalS: number;
  readonly layerCrystalNm: number;
  /**
   * The model fit of the layer in progress (estimator `fit`), or null. Its reading buffers are
   * appended to in place — the one mutable part of the state, owned by the layer: a run, a replay
   * and a simulation each make their own, and the reducer never branches on an old state.
   */
  readonly fit: FitRun | null;
  /** Part thickness every layer is to reach: the design's, or as compensation re-optimised them. */
  readonly targetsNm: readonly number[];
  /** Sources whose last close is not confirmed. */
  readonly unconfirmedCloses: readonly string[];
  /**
   * Awaiting a close: when the wait began; NaN once it has been alerted (after `settleS`, so that
   * a close sent a moment ago, as a skip's, is not an alarm) or when not waiting.
   */
  readonly awaitingSinceS: number;
  /** Instrument links lost and not yet back. */
  readonly linksDown: readonly string[];
  /** Run time the run was last taken up again after a stop (NaN: never): the crystal's next reading is a fresh start. */
  readonly resumedAtS: number;
  /** The optical monitor's rms noise as the last layer's readings showed it (NaN before any): see `fitNoise`. */
  readonly monitorNoise: number;
}

/**
 * The state after a reading or a tick, built field by field: this runs for every reading, and an
 * object literal of fixed shape costs a few tens of nanoseconds where a spread costs hundreds.
 */
export function withReading(
  s: ControllerState,
  nowS: number,
  lastOpticalS: number,
  lastCrystalS: number,
  optical: OpticalTrack,
  turns: TurnDetector,
  crystal: CrystalTrack,
  layerCrystalNm: number,
): ControllerState {
  return {
    phase: s.phase,
    phaseBeforeHold: s.phaseBeforeHold,
    index: s.index,
    plan: s.plan,
    nowS,
    openedAtS: s.openedAtS,
    cutAtS: s.cutAtS,
    mode: s.mode,
    optical,
    turns,
    crystal,
    crystalBelow: s.crystalBelow,
    crystalUnit: s.crystalUnit,
    clocks: s.clocks,
    achievedNm: s.achievedNm,
    indexFactors: s.indexFactors,
    opticalNm: s.opticalNm,
    materialIndex: s.materialIndex,
    materialRate: s.materialRate,
    chipRecords: s.chipRecords,
    materialAfter: s.materialAfter,
    approachingSent: s.approachingSent,
    rateAlerted: s.rateAlerted,
    crystalAlerted: s.crystalAlerted,
    openAlerts: s.openAlerts,
    alertCount: s.alertCount,
    faults: s.faults,
    faultReports: s.faultReports,
    faultsDueS: s.faultsDueS,
    lastOpticalS,
    lastCrystalS,
    layerCrystalNm,
    fit: s.fit,
    targetsNm: s.targetsNm,
    unconfirmedCloses: s.unconfirmedCloses,
    awaitingSinceS: s.awaitingSinceS,
    linksDown: s.linksDown,
    resumedAtS: s.resumedAtS,
    monitorNoise: s.monitorNoise,
  };
}

export const STEADY_CLOCK: ChannelClock = Object.freeze({ offsetS: 0, streak: 0, lastS: Number.NaN, firstS: Number.NaN, presentS: Number.NaN });
/** A crystal whose stack is not known: its next reading is its reference. */
export const UNKNOWN_CRYSTAL: CrystalUnit = Object.freeze({ referenceHz: Number.NaN, stack: [], layer: -1, carriedNm: 0 });

/** The optical channel at a layer's start. */
export function freshOptical(plan: LayerPlan | undefined): OpticalTrack {
  let low = Number.POSITIVE_INFINITY;
  let high = Number.NEGATIVE_INFINITY;
  for (const v of plan?.curve.signal ?? []) {
    if (v < low) low = v;
    if (v > high) high = v;
  }
  const jumpLimit = high >= low ? 2 * (high - low) : 0;
  return { value: Number.NaN, since: Number.NaN, gapFromS: Number.NaN, jumpLimit, suspects: 0, suspectValue: Number.NaN, erratic: false, distrusted: false, backTooLateSaid: false };
}

/** The plan of the layer in progress. */
export function layerPlanOf(s: ControllerState): LayerPlan {
  return s.plan.layers[s.index - (s.plan.fromLayer - 1)] as LayerPlan;
}

/** The recipe of the layer in progress. */
export function layerRecipeOf(recipe: ResolvedRecipe, s: ControllerState): RecipeLayer {
  return recipe.layers[s.index] as RecipeLayer;
}

/**
 * Waiting for the close of the layer in progress: cut (its estimate recorded), not finished (its
 * crystal record not yet taken), its shutter perhaps still open.
 */
export function awaitingOwnClose(s: ControllerState): boolean {
  return s.phase === 'awaiting-close' && s.achievedNm.length > s.crystalBelow.length;
}

/** Whether the layer in progress may still be growing: its records (crystal, fit) go on. */
export function isGrowing(s: ControllerState): boolean {
  return s.phase === 'depositing' || s.phase === 'closing' || awaitingOwnClose(s);
}
