/** The timed rule: cut when the planned time less the shutter's delay has passed. */
import { cutAt, type CutRule } from './cut-rule.ts';

export const timedRule: CutRule<null> = {
  estimate(_own, now) {
    return { thicknessNm: now.layer.rateNmPerS * now.elapsedS, sigmaNm: now.plan.plainRulePrecisionNm };
  },
  decide(_own, now) {
    const { layer } = now;
    if (now.elapsedS + layer.shutterDelayS >= now.plan.targetNm / layer.rateNmPerS) return cutAt('time', layer.rateNmPerS * (now.elapsedS + layer.shutterDelayS), now.delayNm);
    return null;
  },
};
