/**
 * The plain turning-point rule: cut when the extremum at the target is confirmed (the turn
 * detector has seen one turn more than those before it) and the signal has come back past it by
 * the recipe's overshoot, a fraction of the layer's swing.
 */
import type { TurnDetector } from '../estimators/turn-detector.ts';
import { cutAt, plainEstimate, type CutRule } from './cut-rule.ts';

export const turningPointRule: CutRule<TurnDetector> = {
  estimate: plainEstimate,
  decide(turns, now) {
    if (!now.armed) return null;
    const needed = turns.turnsNeeded + 1;
    const overshoot = now.layer.overshootFraction * now.plan.swing;
    if (turns.turnsPassed >= needed && Math.abs(turns.smoothed - turns.extreme) >= overshoot) return cutAt('turning-point', now.plan.targetNm, now.delayNm);
    return null;
  },
};
