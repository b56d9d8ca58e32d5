// The cut rules and the plain rules' turn detector as parts: each judged on a layer's present
// built by hand, and the controller's estimate as the rule cutting the layer gives it.
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { planRun, type LayerPlan } from '../../../src/model/plan/plan.ts';
import { createController, liveFitEstimate } from '../../../src/pipeline/controller.ts';
import { readTurns, startTurnDetector, type TurnDetector } from '../../../src/pipeline/estimators/turn-detector.ts';
import { crystalCalibratedRule } from '../../../src/pipeline/rules/crystal-calibrated.ts';
import { crystalThicknessRule } from '../../../src/pipeline/rules/crystal-thickness.ts';
import type { LayerNow } from '../../../src/pipeline/rules/cut-rule.ts';
import { createGuardRails } from '../../../src/pipeline/rules/guard-rails.ts';
import { operatorCutRule } from '../../../src/pipeline/rules/operator-cut.ts';
import { timedRule } from '../../../src/pipeline/rules/timed.ts';
import { createTriggerLevelRule } from '../../../src/pipeline/rules/trigger-level.ts';
import { turningPointRule } from '../../../src/pipeline/rules/turning-point.ts';
import { runIdeal } from '../../support/ideal-chamber.ts';

const recipeFile = (name: string): string => fileURLToPath(new URL(`../../../config/recipes/${name}`, import.meta.url));
const ar4 = loadRecipe(recipeFile('ar4-visible.yaml'));
const mirror = loadRecipe(recipeFile('mirror-1064.yaml'));
const plan = planRun(ar4, { suggest: 'none' });
const layerPlan = plan.layers[0] as LayerPlan;
const layer = ar4.layers[0] as (typeof ar4.layers)[number];

/** Layer 1 of the AR coating at `thicknessNm` on the crystal, growing at the planned rate. */
function present(thicknessNm: number, changes: Partial<LayerNow> = {}): LayerNow {
  const rateNmPerS = layer.rateNmPerS;
  return {
    plan: layerPlan,
    layer,
    mode: layerPlan.cut,
    sampleRateHz: ar4.monitor.sampleRateHz,
    nowS: thicknessNm / rateNmPerS,
    elapsedS: thicknessNm / rateNmPerS,
    thicknessNm,
    crystalNm: thicknessNm,
    rateNmPerS,
    delayNm: rateNmPerS * layer.shutterDelayS,
    armed: thicknessNm >= 0.7 * layerPlan.targetNm,
    crystalSilent: false,
    ...changes,
  };
}

const turns = (changes: Partial<TurnDetector>): TurnDetector => ({ ...startTurnDetector(layerPlan, 0.01), ...changes });

describe('the cut rules', () => {
  const target = layerPlan.targetNm;
  const delayNm = layer.rateNmPerS * layer.shutterDelayS;

  it('crystal thickness: cuts once thickness plus the delay’s growth reaches the target, not before, and never on a silent crystal', () => {
    expect(crystalThicknessRule.decide(null, present(target - delayNm - 0.01))).toBeNull();
    const cut = crystalThicknessRule.decide(null, present(target - delayNm + 0.01));
    expect(cut?.reason).toBe('crystal-thickness');
    expect(cut?.estimatedNm).toBeCloseTo(target + 0.01, 9);
    expect(cut?.recordedNm).toBe(cut?.estimatedNm);
    expect(cut?.delayAllowanceNm).toBeCloseTo(delayNm, 12);
    expect(crystalThicknessRule.decide(null, present(2 * target, { crystalSilent: true }))).toBeNull();
  });

  it('crystal calibrated: cuts at ρ·crystal = the optical target, reports it at the index, records the crystal’s', () => {
    const calibration = { rate: 1.05, index: 1.02 };
    const atCut = target / 1.05;
    expect(crystalCalibratedRule.decide(calibration, present(atCut - delayNm - 0.01))).toBeNull();
    const cut = crystalCalibratedRule.decide(calibration, present(atCut - delayNm + 0.01));
    expect(cut?.reason).toBe('crystal-calibrated');
    expect(cut?.recordedNm).toBeCloseTo(atCut + 0.01, 9);
    expect(cut?.estimatedNm).toBeCloseTo((1.05 * (atCut + 0.01)) / 1.02, 9);
    expect(crystalCalibratedRule.decide(calibration, present(2 * target, { crystalSilent: true }))).toBeNull();
    expect(crystalCalibratedRule.estimate(calibration, present(100))?.thicknessNm).toBeCloseTo((1.05 * 100) / 1.02, 9);
  });

  it('trigger level: armed, and beyond the level for the debounce count of readings', () => {
    const rule = createTriggerLevelRule(3);
    expect(rule.decide(turns({ beyond: 2 }), present(target))).toBeNull();
    expect(rule.decide(turns({ beyond: 3 }), present(0.5 * target))).toBeNull();
    const cut = rule.decide(turns({ beyond: 3 }), present(target));
    expect(cut).toMatchObject({ reason: 'trigger-level', estimatedNm: target, recordedNm: target });
  });

  it('turning point: one turn more than those before the target, and back past it by the overshoot', () => {
    const needed = startTurnDetector(layerPlan, 0.01).turnsNeeded + 1;
    const overshoot = layer.overshootFraction * layerPlan.swing;
    const past = turns({ turnsPassed: needed, smoothed: 0.5, extreme: 0.5 + overshoot + 1e-6 });
    expect(turningPointRule.decide(past, present(target))?.reason).toBe('turning-point');
    expect(turningPointRule.decide(turns({ turnsPassed: needed - 1, smoothed: 0.5, extreme: 0.6 }), present(target))).toBeNull();
    expect(turningPointRule.decide(past, present(0.5 * target))).toBeNull();
    if (overshoot > 0) expect(turningPointRule.decide(turns({ turnsPassed: needed, smoothed: 0.5, extreme: 0.5 + 0.5 * overshoot }), present(target))).toBeNull();
  });

  it('timed: at the planned time less the shutter delay, from the clock alone', () => {
    const dueS = target / layer.rateNmPerS - layer.shutterDelayS;
    expect(timedRule.decide(null, present(0, { elapsedS: dueS - 0.01 }))).toBeNull();
    expect(timedRule.decide(null, present(0, { elapsedS: dueS + 0.01 }))?.estimatedNm).toBeCloseTo(layer.rateNmPerS * (dueS + 0.01 + layer.shutterDelayS), 9);
  });

  it('the operator’s cut: now, at the crystal’s thickness or the clock’s before the crystal’s first reading, no delay allowed', () => {
    expect(operatorCutRule.decide(null, present(12))).toMatchObject({ reason: 'operator', estimatedNm: 12, delayAllowanceNm: 0 });
    expect(operatorCutRule.decide(null, present(0, { crystalNm: Number.NaN, elapsedS: 10 })).estimatedNm).toBeCloseTo(10 * layer.rateNmPerS, 12);
  });

  it('guard rails: past the thickness ceiling (a crystal that answers) or the time ceiling, with the alarm', () => {
    const guards = createGuardRails({ thicknessCeiling: 1.3, timeCeiling: 1.6 });
    expect(guards.decide(null, present(target))).toBeNull();
    const thick = guards.decide(null, present(1.31 * target, { elapsedS: 1 }));
    expect(thick?.reason).toBe('thickness-ceiling');
    expect(thick?.alert?.code).toBe('thickness-ceiling');
    // A silent crystal's thickness is the clock's: only the time ceiling applies.
    expect(guards.decide(null, present(1.31 * target, { crystalSilent: true, elapsedS: 1 }))).toBeNull();
    const late = guards.decide(null, present(0, { crystalSilent: true, elapsedS: 1.61 * layerPlan.durationS }));
    expect(late?.reason).toBe('time-ceiling');
    expect(late?.alert?.message).toContain('s planned');
  });
});

describe('the turn detector (the plain rules’ estimator)', () => {
  const rising: LayerPlan = { ...layerPlan, direction: 'rising', triggerSignal: 0.8 };
  // Readings 0.1 s apart, on from the detector's last.
  const feed = (start: TurnDetector, values: number[], smoothingS = 1e-9): TurnDetector =>
    values.reduce((d, v) => readTurns(d, rising, Number.isNaN(d.lastS) ? 0 : d.lastS + 0.1, v, smoothingS), start);

  it('confirms a turn only when the signal comes back by the confirmation step, and counts readings beyond the level', () => {
    const start = { ...startTurnDetector(rising, 0.05), trend: 1 as const, turnsNeeded: 0 };
    const up = feed(start, [0.5, 0.6, 0.7, 0.82, 0.85]);
    expect(up.turnsPassed).toBe(0);
    expect(up.beyond).toBe(2);
    // Back by less than the step: no turn; by more: one, and the trend reverses.
    expect(feed(up, [0.81]).turnsPassed).toBe(0);
    const turned = feed(up, [0.81, 0.79]);
    expect(turned.turnsPassed).toBe(1);
    expect(turned.trend).toBe(-1);
    expect(turned.beyond).toBe(0);
  });

  it('averages the signal with its time constant: a single spike does not make a turn', () => {
    const start = { ...startTurnDetector(rising, 0.05), trend: 1 as const, turnsNeeded: 0 };
    const spiked = feed(start, [0.5, 0.51, 0.52, 0.2, 0.53, 0.54], 1);
    expect(spiked.turnsPassed).toBe(0);
    // With no averaging the same spike is a turn: the average is what prevents it.
    expect(feed(start, [0.5, 0.51, 0.52, 0.2, 0.53, 0.54]).turnsPassed).toBeGreaterThan(0);
  });
});

describe('the controller’s estimate: the rule cutting the layer says it', () => {
  it('with the fit, on an optical layer (mirror layer 1), the fit’s thickness and rms, as the live readout has it', () => {
    const controller = createController(mirror, { estimator: 'fit' });
    const first = mirror.layers[0] as (typeof mirror.layers)[number];
    const { state } = runIdeal(mirror, controller, { noise: 0.001, maxS: 0.6 * (first.targetNm / first.rateNmPerS) });
    expect(state.index).toBe(0);
    expect(state.fit).not.toBeNull();
    const live = liveFitEstimate(mirror, state, state.nowS);
    expect(live).not.toBeNull();
    expect(controller.estimate(state)).toEqual(live);
  });

  it('with the plain rules, the crystal’s thickness with the plan’s precision of the plain rule; none before the run', () => {
    const controller = createController(ar4, { estimator: 'plain' });
    expect(controller.estimate(controller.initial())).toBeNull();
    const { state } = runIdeal(ar4, controller, { maxS: 20 });
    const est = controller.estimate(state);
    const lp = state.plan.layers[state.index - (state.plan.fromLayer - 1)];
    expect(est?.thicknessNm).toBe(state.crystal.partNm);
    expect(est?.sigmaNm).toBe(lp?.plainRulePrecisionNm);
  });
});
