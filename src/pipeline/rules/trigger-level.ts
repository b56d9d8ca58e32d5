/**
 * The plain trigger-level rule: after the planned turning points, cut when the signal has been
 * beyond the plan's trigger level (which allows for the shutter delay) for `debounceReadings`
 * readings in a row (the turn detector counts them).
 */
import type { TurnDetector } from '../estimators/turn-detector.ts';
import { cutAt, plainEstimate, type CutRule } from './cut-rule.ts';

export function createTriggerLevelRule(debounceReadings: number): CutRule<TurnDetector> {
  return {
    estimate: plainEstimate,
    decide(turns, now) {
      if (now.armed && turns.beyond >= debounceReadings) return cutAt('trigger-level', now.plan.targetNm, now.delayNm);
      return null;
    },
  };
}
