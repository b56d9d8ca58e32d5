/**
 * What the controller decides and reports: a small, versioned vocabulary. Every event carries
 * the run time it was decided at. Bump {@link EVENT_FORMAT_VERSION} when a field changes meaning.
 */
import type { AlertCode, Severity } from './codes.ts';
import type { ShutterCommand } from './types.ts';
import type { CutMode } from '../model/plan/recipe.ts';

export const EVENT_FORMAT_VERSION = 1;

export type CutReason =
  | 'model-fit'
  | 'trigger-level'
  | 'turning-point'
  | 'crystal-thickness'
  | 'crystal-calibrated'
  | 'time'
  | 'thickness-ceiling'
  | 'time-ceiling'
  | 'operator'
  | 'abort';

export type RunEvent =
  | { readonly type: 'run-started'; readonly timeS: number; readonly layers: number }
  | {
      readonly type: 'layer-started';
      readonly timeS: number;
      readonly layer: number;
      readonly material: string;
      readonly cut: CutMode;
      readonly targetNm: number;
    }
  | { readonly type: 'shutter'; readonly timeS: number; readonly command: ShutterCommand }
  | { readonly type: 'approaching-cut'; readonly timeS: number; readonly layer: number; readonly expectedInS: number }
  | {
      readonly type: 'cut';
      readonly timeS: number;
      readonly layer: number;
      readonly reason: CutReason;
      /** Estimated part thickness when the shutter will have closed, nm. */
      readonly estimatedNm: number;
      /** Thickness expected to grow during the shutter delay, nm (already in `estimatedNm`). */
      readonly delayAllowanceNm: number;
      /** Optical signal at the cut (NaN when none). */
      readonly signal: number;
    }
  | {
      readonly type: 'layer-finished';
      readonly timeS: number;
      readonly layer: number;
      /** Estimated achieved part thickness, nm (handed to the re-plan). */
      readonly estimatedNm: number;
      /** The crystal's figure for the same layer (NaN without a crystal). */
      readonly crystalNm: number;
      /** The layer's index over the design's as the model fit estimated it (NaN when not fitted). */
      readonly indexFactor: number;
      readonly skipped: boolean;
    }
  | { readonly type: 'mode-changed'; readonly timeS: number; readonly layer: number; readonly from: CutMode; readonly to: CutMode }
  | {
      readonly type: 'alert';
      readonly timeS: number;
      readonly id: string;
      readonly severity: Severity;
      readonly code: AlertCode;
      readonly message: string;
      readonly layer: number | null;
    }
  | { readonly type: 'alert-acknowledged'; readonly timeS: number; readonly id: string }
  | {
      readonly type: 'compensated';
      readonly timeS: number;
      /** First layer whose target changed. */
      readonly fromLayer: number;
      readonly beforeNm: readonly number[];
      readonly afterNm: readonly number[];
      /** rms deviation of the finished stack's spectrum from the design's over the band, before and after. */
      readonly rmsBefore: number;
      readonly rmsAfter: number;
    }
  | { readonly type: 'replanned'; readonly timeS: number; readonly fromLayer: number; readonly triggerSignals: readonly number[] }
  | { readonly type: 'held' | 'resumed'; readonly timeS: number; readonly layer: number }
  | { readonly type: 'run-finished'; readonly timeS: number; readonly outcome: 'complete' | 'aborted' };

export type RunEventType = RunEvent['type'];
