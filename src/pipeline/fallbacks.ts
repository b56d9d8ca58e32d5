/**
 * The fallbacks: which mode a layer is cut in while its instruments come and go. A silent monitor
 * hands the layer to the crystal, a silent crystal to the clock; one answering again takes it back.
 */
import type { LayerPlan } from '../model/plan/plan.ts';
import type { CutMode } from '../model/plan/recipe.ts';
import type { ControllerContext } from './controller-options.ts';
import { layerRecipeOf, type ControllerState } from './controller-state.ts';
import { fitBridges, leftToCrystal } from './estimators/model-fit.ts';

/**
 * The mode the layer should be cut in now: its planned one while its monitor answers, else the
 * crystal, else the clock. Leaving a mode takes silence (staleAfterS); coming back to one takes
 * recoverS of unbroken readings. With the fit, which runs on its own clock through a gap (on
 * the crystal's, the readings on both sides of the gap in one fit), an optical layer comes back
 * unless too little of it is left ({@link monitorBackTooLate}). Without it, a level layer whose
 * gap hid at most one turning point, which the turn detector still counts when the signal shows
 * up past it; a turning-point layer on the plain rule stays on the crystal: its detector, having
 * lost the extremum's approach, cut a harsh-profile mirror layer 36 nm thin where the crystal
 * had been within 2 nm.
 */
export function wantedMode(ctx: ControllerContext, s: ControllerState, plan: LayerPlan, opticalSilent: boolean, crystalSilent: boolean): CutMode {
  const { opts } = ctx;
  const planned = plan.cut;
  if (planned === 'time') return s.mode;
  const optical = planned === 'level' || planned === 'turning-point';
  const resumes = (): boolean => (s.fit !== null ? !monitorBackTooLate(ctx, s, plan) : planned === 'level' && gapHidesOneTurnAtMost(ctx, s, plan, crystalSilent));
  const opticalUsable = optical && !opticalSilent && (s.mode === planned || (s.nowS - s.optical.since >= opts.recoverS && resumes()));
  if (opticalUsable) return planned;
  const crystalUsable = !crystalSilent && (s.mode === 'crystal' || s.nowS - s.crystal.since >= opts.recoverS);
  return crystalUsable ? 'crystal' : 'time';
}

/**
 * A monitor answering again on a layer the fit bridges on the crystal (estimators/model-fit.ts,
 * `fitBridges`) with less of it left than `resumeFloorNm`: the crystal, calibrated by the fit,
 * keeps the layer.
 */
export function monitorBackTooLate(ctx: ControllerContext, s: ControllerState, plan: LayerPlan): boolean {
  if (!s.fit || !fitBridges(s.fit, s.mode, plan.cut)) return false;
  return leftToCrystal(layerRecipeOf(ctx.recipe, s), plan, s.fit, s, s.nowS, ctx.recipe.crystal.toolingSigmaPercent).stays;
}

/** Whether the optical gap before the present run of readings spans at most one of the layer's planned turning points. */
function gapHidesOneTurnAtMost(ctx: ControllerContext, s: ControllerState, plan: LayerPlan, crystalSilent: boolean): boolean {
  const layer = layerRecipeOf(ctx.recipe, s);
  const elapsed = s.nowS - s.openedAtS;
  const partNm = !crystalSilent && Number.isFinite(s.crystal.partNm) ? s.crystal.partNm : layer.rateNmPerS * elapsed;
  const rate = !crystalSilent && Number.isFinite(s.crystal.rateNmPerS) ? s.crystal.rateNmPerS : layer.rateNmPerS;
  const chip = (nm: number): number => nm * layer.chipRatio;
  // The gap's span on the chip, widened by a tenth of the target for the rate's error.
  const margin = 0.1 * plan.chipTargetNm;
  const fromNm = chip(partNm - rate * (s.nowS - s.optical.gapFromS)) - margin;
  const toNm = chip(partNm - rate * (s.nowS - s.optical.since)) + margin;
  return plan.turningPoints.filter((tp) => tp.thicknessNm >= fromNm && tp.thicknessNm <= toNm).length <= 1;
}

