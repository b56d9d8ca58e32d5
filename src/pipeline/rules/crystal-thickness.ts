/**
 * The crystal-thickness rule: cut when the crystal's tooling-corrected thickness plus what grows
 * during the shutter's delay reaches the target. A silent crystal cuts nothing (the controller
 * hands the layer to the clock).
 */
import { cutAt, plainEstimate, type CutRule } from './cut-rule.ts';

export const crystalThicknessRule: CutRule<null> = {
  estimate: plainEstimate,
  decide(_own, now) {
    if (now.crystalSilent) return null;
    const atCloseNm = now.thicknessNm + now.delayNm;
    return atCloseNm >= now.plan.targetNm ? cutAt('crystal-thickness', atCloseNm, now.delayNm) : null;
  },
};
