/**
 * The plain rules' estimator: a threshold turn detector on the optical signal, and the count of
 * readings in a row beyond the layer's trigger level. The turning-point and trigger-level rules
 * (src/pipeline/rules/) cut on what it has seen. Plain data, a new value per reading.
 */
import type { LayerPlan } from '../../model/plan/plan.ts';
import { visibleTurns } from '../../model/plan/turn-visibility.ts';

export { confirmStep, visibleTurns, type TurnDetectorOptions } from '../../model/plan/turn-visibility.ts';

export interface TurnDetector {
  /** Time of the last reading taken, s. */
  readonly lastS: number;
  /** The signal through the detector's exponential average. */
  readonly smoothed: number;
  /** Running extremum (of the smoothed signal) in the current trend. */
  readonly extreme: number;
  readonly trend: 1 | -1;
  readonly turnsPassed: number;
  /** Signal step that confirms a turn. */
  readonly confirm: number;
  /** Turns the detector must see before the cut (see {@link visibleTurns}). */
  readonly turnsNeeded: number;
  /** Consecutive readings beyond the trigger level. */
  readonly beyond: number;
}

/** The detector at a layer's start. The extremum starts at the first reading, not the plan's start: gain and offset drift. */
export function startTurnDetector(plan: LayerPlan | undefined, confirm: number): TurnDetector {
  const { trend, turnsNeeded } = visibleTurns(plan, confirm);
  return { lastS: Number.NaN, smoothed: Number.NaN, extreme: Number.NaN, trend, turnsPassed: 0, confirm, turnsNeeded, beyond: 0 };
}

/** The detector after an optical reading of the layer, averaged with time constant `smoothingS`. */
export function readTurns(d: TurnDetector, plan: LayerPlan, timeS: number, value: number, smoothingS: number): TurnDetector {
  const confirm = d.confirm;
  const smoothed = Number.isNaN(d.smoothed) ? value : d.smoothed + (1 - Math.exp(-(timeS - d.lastS) / smoothingS)) * (value - d.smoothed);
  let { extreme, trend, turnsPassed } = d;
  if (Number.isNaN(extreme) || (trend > 0 ? smoothed > extreme : smoothed < extreme)) extreme = smoothed;
  else if (trend > 0 ? smoothed < extreme - confirm : smoothed > extreme + confirm) {
    turnsPassed++;
    trend = trend > 0 ? -1 : 1;
    extreme = smoothed;
  }
  const rising = plan.direction === 'rising' || (plan.direction === 'turning' && trend > 0);
  const isBeyond = rising ? value >= plan.triggerSignal : value <= plan.triggerSignal;
  const beyond = turnsPassed >= d.turnsNeeded && isBeyond ? d.beyond + 1 : 0;
  return { lastS: timeS, smoothed, extreme, trend, turnsPassed, confirm, turnsNeeded: d.turnsNeeded, beyond };
}
