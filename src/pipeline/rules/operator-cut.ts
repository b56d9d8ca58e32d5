/**
 * The operator's cut: now, whatever the rules say, recorded at the crystal's last thickness (or
 * the planned rate's over the elapsed time before the crystal's first reading); no delay is
 * allowed for, since the operator chose the instant.
 */
import { cutAt, type Cut, type CutRule, type LayerNow, type ThicknessEstimate } from './cut-rule.ts';

export const operatorCutRule = {
  estimate(_own: null, now: LayerNow): ThicknessEstimate {
    return { thicknessNm: Number.isFinite(now.crystalNm) ? now.crystalNm : now.layer.rateNmPerS * now.elapsedS, sigmaNm: now.plan.plainRulePrecisionNm };
  },
  /** Always a cut: the operator asked for it. */
  decide(own: null, now: LayerNow): Cut {
    return cutAt('operator', operatorCutRule.estimate(own, now).thicknessNm, 0);
  },
} satisfies CutRule<null>;
