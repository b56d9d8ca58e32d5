/**
 * The guard rails: whatever cuts the layer, force a cut (and alarm) above a multiple of the
 * target thickness as the crystal tells it, or after a multiple of the planned duration.
 */
import { ALERTS } from '../codes.ts';
import { plainEstimate, type Cut, type CutRule } from './cut-rule.ts';

export interface GuardRailOptions {
  /** Force a cut above this multiple of the target thickness. */
  readonly thicknessCeiling: number;
  /** Force a cut after this multiple of the planned duration. */
  readonly timeCeiling: number;
}

export function createGuardRails(options: GuardRailOptions): CutRule<null> {
  return {
    estimate: plainEstimate,
    decide(_own, now): Cut | null {
      const { plan, thicknessNm, delayNm } = now;
      const estimatedNm = thicknessNm + delayNm;
      if (!now.crystalSilent && thicknessNm > options.thicknessCeiling * plan.targetNm) {
        const message = `${ALERTS['thickness-ceiling'].sentence} (${thicknessNm.toFixed(1)} nm of ${plan.targetNm.toFixed(1)} nm)`;
        return { reason: 'thickness-ceiling', estimatedNm, delayAllowanceNm: delayNm, recordedNm: estimatedNm, alert: { code: 'thickness-ceiling', message } };
      }
      if (now.elapsedS > options.timeCeiling * plan.durationS) {
        const message = `${ALERTS['time-ceiling'].sentence} (${now.elapsedS.toFixed(0)} s of ${plan.durationS.toFixed(0)} s planned)`;
        return { reason: 'time-ceiling', estimatedNm, delayAllowanceNm: delayNm, recordedNm: estimatedNm, alert: { code: 'time-ceiling', message } };
      }
      return null;
    },
  };
}
