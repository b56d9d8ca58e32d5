// The predicted yield: its error model per cut, its sampling, the linear model against the exact
// one, the plain rules' model on the turning-point chain, and the range a study would measure.
import { fileURLToPath } from 'node:url';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { planRun } from '../../../src/model/plan/plan.ts';
import { predictPlainYield } from '../../../src/model/plan/plain-rule-yield.ts';
import { createNormalStream, layerErrors, LinearYieldModel, predictYield, studyRange } from '../../../src/model/plan/predicted-yield.ts';
import { INDEX_RUN_SIGMA } from '../../../src/model/plan/stack-precision.ts';

const root = fileURLToPath(new URL('../../../', import.meta.url));
const typical = { indexOffset: 0.01, indexCommonSigma: 0, indexMaterialSigma: 0.005 };

describe('the predicted yield', () => {
  it('draws standard normal deviates, the same for a seed', () => {
    const a = createNormalStream(7);
    const xs = Array.from({ length: 20000 }, () => a());
    const mean = xs.reduce((s, x) => s + x, 0) / xs.length;
    const variance = xs.reduce((s, x) => s + (x - mean) ** 2, 0) / xs.length;
    // Standard normal: mean 0, variance 1 (derived); 20,000 draws hold them to ~0.02.
    expect(Math.abs(mean)).toBeLessThan(0.03);
    expect(Math.abs(variance - 1)).toBeLessThan(0.04);
    const b = createNormalStream(7);
    expect(b()).toBe(xs[0]);
  });

  it('takes a crystal layer physically until a fitted layer of its material has calibrated it', () => {
    const edge = loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'));
    const plan = planRun(edge, { suggest: 'none' });
    const errors = layerErrors(plan);
    // Layer 1 (SiO2, crystal) before any fitted SiO2: the crystal's figure, physical.
    expect(errors[0]).toEqual({ on: 'physical', sigma: (plan.layers[0]?.precisionPercent as number) / 100 });
    // Layer 13 (SiO2, crystal) after five fitted SiO2 layers (3, 5, 7, 9, 11): optical, pooled, no better than the run's index drift.
    const pooled = 1 / Math.sqrt([3, 5, 7, 9, 11].reduce((s, n) => s + 1 / ((plan.layers[n - 1]?.stackPrecisionPercent as number) / 100) ** 2, 0));
    expect(errors[12]?.on).toBe('optical');
    expect(errors[12]?.sigma).toBeCloseTo(Math.hypot(pooled, INDEX_RUN_SIGMA), 12);
    // An optical layer: its stack figure.
    expect(errors[1]).toEqual({ on: 'optical', sigma: (plan.layers[1]?.stackPrecisionPercent as number) / 100 });
  });

  it('agrees, linearised, with the exact sampling on the edge filter, and falls as the errors grow', () => {
    const edge = loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'));
    const errors = layerErrors(planRun(edge, { suggest: 'none' }));
    const exact = predictYield(edge, errors, typical, { samples: 300 });
    const linear = new LinearYieldModel(edge, errors, typical, { samples: 300 });
    expect(Math.abs((linear.predict().yieldPercent as number) - (exact.yieldPercent as number))).toBeLessThan(5);
    const worse = predictYield(edge, errors.map((e) => ({ ...e, sigma: 5 * e.sigma })), typical, { samples: 300 });
    expect(worse.yieldPercent as number).toBeLessThan((exact.yieldPercent as number) - 10);
    // One layer changed by the linear model's trial equals the same change committed.
    const trial = linear.predict({ layer: 5, error: { on: 'optical', sigma: 0.05 } });
    linear.commit(5, { on: 'optical', sigma: 0.05 });
    expect(linear.predict()).toEqual(trial);
    expect(trial.yieldPercent as number).toBeLessThan(linear.predictAll(errors).yieldPercent as number);
  });

  it('predicts the plain turning-point rule late on every mirror layer, as its detector confirms a turn only past it', () => {
    const mirror = loadRecipe(join(root, 'config/recipes/mirror-1064.yaml'));
    const plan = planRun(mirror, { suggest: 'none' });
    // The study (typical profile, 20 runs, seeds 1–20) measured plain 0 %: layer 1 9.5 % thick.
    expect(predictPlainYield(mirror, plan, typical, { samples: 40 }).yieldPercent).toBeLessThan(10);
    // Without tolerances there is no yield to predict.
    const bare = { ...mirror, design: { ...mirror.design, tolerances: [] } };
    expect(predictPlainYield(bare, plan, typical).yieldPercent).toBeNull();
  });

  it('gives the range a study would measure: binomial quantiles around the prediction', () => {
    // Binomial(50, 0.8): P(X ≤ 33) = 0.0144, P(X ≤ 34) = 0.0308; P(X ≤ 44) = 0.9520, P(X ≤ 45) = 0.9815
    // (derived, exact sums): 34 and 45 of 50. With 10⁶ samples the prediction's own interval is negligible.
    expect(studyRange(80, 1e6, 50)).toEqual({ low: 68, high: 90 });
    // With 100 samples it is not: the range widens on both sides.
    const few = studyRange(80, 100, 50);
    expect(few.low).toBeLessThan(68);
    expect(few.high).toBeGreaterThan(90);
    expect(studyRange(100, 600, 50).high).toBe(100);
    expect(studyRange(0, 600, 50).low).toBe(0);
  });
});
