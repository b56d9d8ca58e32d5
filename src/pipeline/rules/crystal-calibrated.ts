/**
 * The crystal calibrated by the optical fits of the material's earlier layers: their rate on the
 * crystal's clock (ρ) turns the crystal's thickness into the optical one, so the layer is cut at
 * ρ·crystal = the optical target, and recorded at its crystal thickness (the chip model
 * calibrates it, now and as the calibration improves).
 */
import { cutAt, type CutRule } from './cut-rule.ts';

/** A material's calibration: its rate on the crystal's clock and its index, each over the design's. */
export interface CrystalCalibration {
  readonly rate: number;
  readonly index: number;
}

export const crystalCalibratedRule: CutRule<CrystalCalibration> = {
  estimate(calibration, now) {
    return { thicknessNm: (calibration.rate * now.thicknessNm) / calibration.index, sigmaNm: now.plan.plainRulePrecisionNm };
  },
  decide(calibration, now) {
    if (now.crystalSilent) return null;
    const atCloseNm = now.thicknessNm + now.delayNm;
    if (calibration.rate * atCloseNm >= now.plan.targetNm) return cutAt('crystal-calibrated', (calibration.rate * atCloseNm) / calibration.index, now.delayNm, atCloseNm);
    return null;
  },
};
