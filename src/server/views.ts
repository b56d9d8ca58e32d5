/**
 * What the dashboard is shown: plain JSON-safe objects (every number finite or null, since JSON
 * has no NaN), built by the run hub from the controller's state and events. The same shapes go
 * over HTTP (`GET /api/run`) and the WebSocket feed (`/api/live`).
 */
import type { Severity } from '../pipeline/codes.ts';
import type { Phase } from '../pipeline/controller.ts';
import type { CutReason, RunEvent } from '../pipeline/events.ts';
import type { CutMode } from '../model/plan/recipe.ts';
import type { Estimator } from '../pipeline/cut-words.ts';

/** Bump when a field of a view changes meaning. */
export const VIEW_FORMAT_VERSION = 1;

/** Where the run's readings come from. */
export type RunSourceKind = 'simulated' | 'live' | 'replay';

export interface AlertView {
  readonly id: string;
  readonly severity: Severity;
  readonly code: string;
  readonly message: string;
  readonly layer: number | null;
  readonly timeS: number;
  readonly open: boolean;
}

/** The one line across the top: is the run healthy? */
export interface RunStatus {
  readonly phase: Phase;
  /** False once the run has finished, been aborted or stopped. */
  readonly running: boolean;
  /** Run time, s. */
  readonly nowS: number;
  /** The current layer, 1-based (null before the first opens). */
  readonly layer: number | null;
  readonly layers: number;
  readonly material: string | null;
  /** How the current layer is being cut (after any fallback): its mode as planned. */
  readonly cut: CutMode | null;
  /**
   * The rule that cuts the current layer now: the model fit while it runs on an optical layer,
   * else the plain rule of its mode (null when no layer is open).
   */
  readonly cutBy: CutReason | null;
  /** Design thickness of the current layer on the parts, nm. */
  readonly targetNm: number | null;
  /**
   * Estimated thickness of the current layer on the parts so far, nm: the model fit's (at the
   * design index, as the cut compares it with the target) while it runs, else the crystal's,
   * else the clock's; `estimateSource` says which.
   */
  readonly thicknessNm: number | null;
  /** The ± beside it, nm: the fit's rms while it runs, else the plan's expected rms precision of the cut. */
  readonly plusMinusNm: number | null;
  readonly estimateSource: 'fit' | 'crystal' | 'clock' | null;
  /** Run time since the layer's shutter opened, s. */
  readonly layerElapsedS: number | null;
  /** Expected run time to the cut command, s (0 while the shutter closes; null when not depositing). */
  readonly timeToCutS: number | null;
  /** The controller announced the cut as imminent for this layer. */
  readonly approaching: boolean;
  readonly openAlerts: number;
  /** The most severe open alert, the latest among equals. */
  readonly worstAlert: AlertView | null;
}

export type LayerStatus = 'past' | 'current' | 'future';

/** One row of the stack table. */
export interface StackRow {
  readonly number: number;
  readonly material: string;
  readonly targetNm: number;
  readonly cut: CutMode;
  /** The rule that cut the layer, or that is cutting it or will as planned. */
  readonly cutRule: CutReason;
  readonly status: LayerStatus;
  readonly chip: string;
  readonly wavelengthNm: number;
  readonly cutReason: CutReason | null;
  readonly skipped: boolean;
  /** Estimated achieved (physical) thickness on the parts, nm (once cut): the current figure, revised by chip refits. */
  readonly estimatedNm: number | null;
  /** The figure the layer had when it finished (the log's), nm. */
  readonly firstEstimatedNm: number | null;
  /** The current figure differs from the first by what the table shows (0.01 nm). */
  readonly revised: boolean;
  /** The layer's index over the design's as the fits know it (null before it finished). */
  readonly indexFactor: number | null;
  readonly errorNm: number | null;
  readonly errorPercent: number | null;
}

/** The current layer's trace: prediction, marks, and the measured points so far. */
export interface TraceView {
  readonly layer: number;
  readonly material: string;
  readonly cut: CutMode;
  readonly wavelengthNm: number;
  readonly signal: 'transmission' | 'reflection';
  readonly chip: string;
  /** Run time the shutter opened, s. */
  readonly openedAtS: number | null;
  /** Planned growth on the chip, nm/s (turns the thickness axis into a time axis). */
  readonly chipRateNmPerS: number;
  /** Chip thickness / part thickness. */
  readonly chipRatio: number;
  /** Target on the chip, nm: the predicted cut. */
  readonly chipTargetNm: number;
  readonly targetNm: number;
  /** The prediction: signal (fraction) at chip thickness i · stepNm. */
  readonly stepNm: number;
  readonly predicted: readonly number[];
  /** Signal at which the cut command goes out (allows for the shutter delay); null unless a level cut. */
  readonly triggerSignal: number | null;
  readonly turningPoints: readonly { readonly thicknessNm: number; readonly signal: number; readonly kind: 'maximum' | 'minimum' }[];
  readonly precisionNm: number;
  /** Measured points, decimated: [run time s, signal fraction, estimated chip thickness nm]. */
  readonly points: readonly (readonly [number, number, number])[];
}

/** The crystal strip. */
export interface CrystalView {
  /** Rate history, decimated: [run time s, rate nm/s, band low nm/s, band high nm/s]. */
  readonly points: readonly (readonly [number, number, number, number])[];
  readonly frequencyHz: number | null;
  /** This layer's thickness on the parts from the crystal, nm. */
  readonly partNm: number | null;
  readonly rateNmPerS: number | null;
  readonly plannedRateNmPerS: number | null;
  readonly rateBandPercent: number | null;
  /** Fraction of the crystal's usable span used, 0..1. */
  readonly lifeUsed: number | null;
}

/** The outcome: the stack as deposited so far (estimated), completed with the design. */
export interface OutcomeView {
  readonly fromNm: number;
  readonly toNm: number;
  readonly wavelengthsNm: readonly number[];
  readonly design: { readonly R: readonly number[]; readonly T: readonly number[] };
  readonly deposited: { readonly R: readonly number[]; readonly T: readonly number[] };
  /** The quantity the design is judged by: R for an antireflection coating or a mirror, else T. */
  readonly preferred: 'R' | 'T';
  /** Layers whose estimated thickness replaces the design's. */
  readonly layersEstimated: number;
  readonly maxAbsT: number;
  readonly meanAbsT: number;
  readonly maxAbsR: number;
  readonly meanAbsR: number;
}

/** One entry of the log (an event as the controller decided it, JSON-safe). */
export interface LogEntry {
  readonly seq: number;
  readonly event: RunEvent;
}

export interface RunSnapshot {
  readonly version: number;
  readonly source: RunSourceKind;
  readonly runId: string | null;
  /** Multiple of real time (null for a live run). */
  readonly speed: number | null;
  /** How the run's controller decides optical layers. */
  readonly estimator: Estimator;
  readonly recipe: string;
  /** Commands are taken (false for a replay, or before a run is attached). */
  readonly commandsAccepted: boolean;
  readonly status: RunStatus;
  readonly layers: readonly StackRow[];
  readonly trace: TraceView | null;
  readonly crystal: CrystalView;
  readonly alerts: readonly AlertView[];
  /** Recent events, oldest first. */
  readonly log: readonly LogEntry[];
  readonly outcome: OutcomeView | null;
}

/** What a hub tells its subscribers, in order. */
export type HubMessage =
  | { readonly type: 'event'; readonly seq: number; readonly event: RunEvent }
  /** A decimated optical point of layer `layer`: [run time s, signal, chip nm]. */
  | { readonly type: 'optical'; readonly layer: number; readonly point: readonly [number, number, number] }
  /** A decimated crystal point: [run time s, rate nm/s, band low, band high], and the figures beside the strip. */
  | {
      readonly type: 'crystal';
      readonly point: readonly [number, number, number, number];
      readonly partNm: number | null;
      readonly frequencyHz: number | null;
      readonly lifeUsed: number | null;
    }
  /** A discrete change of the status line (phase, layer, mode, alerts). */
  | { readonly type: 'status'; readonly status: RunStatus }
  /** The layer, plan or outcome changed: everything anew. */
  | { readonly type: 'snapshot'; readonly snapshot: RunSnapshot };
