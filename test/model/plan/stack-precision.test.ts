// The stack figure of the plan: how much of a layer's cut error the layers below it bring. The
// sensitivity it rests on is checked against the estimator itself: the model fit of noise-free
// readings from a chip whose layer below is 0.5 nm thicker than the model's.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { createLayerFit } from '../../../src/model/estimate/index.ts';
import { chipMonitorFor, planRun } from '../../../src/model/plan/plan.ts';
import { DEFAULT_PRIORS } from '../../../src/model/plan/precision.ts';
import { belowStackPrecisionNm } from '../../../src/model/plan/stack-precision.ts';

const root = fileURLToPath(new URL('../../../', import.meta.url));
const edge = loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'));
const design = edge.layers.map((l) => l.targetNm);
const NOISE = 0.001;
const HZ = 10;

describe('belowStackPrecisionNm', () => {
  for (const [layerNumber, below] of [
    [4, 3],
    [12, 11],
    [22, 21],
  ] as const) {
    it(`layer ${layerNumber}: the bias it predicts for layer ${below} 0.5 nm thick is the fit's own`, () => {
      const i = layerNumber - 1;
      const layer = edge.layers[i]!;
      const rate = layer.rateNmPerS * layer.chipRatio;
      const target = layer.targetNm * layer.chipRatio;
      const perturbed = design.slice();
      perturbed[below - 1] = (design[below - 1] as number) + 0.5 / edge.layers[below - 1]!.chipRatio;
      const model = chipMonitorFor(edge, i, design);
      const truth = chipMonitorFor(edge, i, perturbed);
      const predicted = belowStackPrecisionNm(model, [{ monitor: truth, deltaNm: 0.5, sigmaNm: 0.5 }], target, rate, HZ, NOISE, DEFAULT_PRIORS);
      // The fit on the model's curve, fed the true chip's readings (no noise), to the planned cut.
      const fit = createLayerFit({ monitor: model, targetNm: target, rateNmPerS: rate, ...DEFAULT_PRIORS, noise: NOISE });
      const tCut = target / rate;
      for (let k = 1; k * (1 / HZ) <= tCut; k++) {
        fit.add(k / HZ, truth.signalAt(rate * (k / HZ)));
        fit.update();
      }
      for (let n = 0; n < 60; n++) fit.update();
      const bias = fit.estimate(tCut).thicknessNm - target;
      expect(Math.abs(bias)).toBeGreaterThan(0.002);
      expect(Math.abs(Math.abs(bias) - predicted) / predicted).toBeLessThan(0.1);
    });
  }

  it('a layer with nothing uncertain below it keeps its noise bound; the figure never falls below it', () => {
    const plan = planRun(edge, { suggest: 'none' });
    for (const l of plan.layers) {
      expect(l.stackPrecisionNm, `layer ${l.number}`).toBeGreaterThanOrEqual(l.precisionNm);
      if (l.layerOnChip === 1 || l.cut === 'crystal' || l.cut === 'time') expect(l.stackPrecisionNm).toBe(l.precisionNm);
    }
    // Layer 2 sits on a crystal layer known to 1 %: its figure grows; off, it is the noise bound.
    const off = planRun(edge, { suggest: 'none', stackPrecision: false });
    expect(plan.layers[1]!.stackPrecisionNm).toBeGreaterThan(plan.layers[1]!.precisionNm);
    off.layers.forEach((l) => expect(l.stackPrecisionNm).toBe(l.precisionNm));
  });
});
