// The stack figure of the plan: how much of a layer's cut error the layers below it bring. The
// sensitivity it rests on is checked against the estimator itself: the model fit of noise-free
// readings from a chip whose layer below is 0.5 nm thicker than the model's.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { buildIndexTables, createLayerFit, layerSignalTable } from '../../../src/model/estimate/index.ts';
import { chipMonitorFor, planRun } from '../../../src/model/plan/plan.ts';
import { DEFAULT_PRIORS } from '../../../src/model/plan/precision.ts';
import { layerPrecision } from '../../../src/model/plan/stack-precision.ts';

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
      // κ known (a prior of 1e-6): the fit below is the plain 4-parameter one.
      const index = { plus: chipMonitorFor(edge, i, design, { growingIndexFactor: 1.01 }), minus: chipMonitorFor(edge, i, design, { growingIndexFactor: 0.99 }), delta: 0.01, sigma: 1e-6 };
      const predicted = layerPrecision(model, index, [{ monitor: truth, deltaNm: 0.5, sigmaNm: 0.5 }], target, rate, HZ, NOISE, DEFAULT_PRIORS).belowNm;
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

  it('with the index unknown (3 %), the bound at the cut is what the fit reaches: Monte Carlo on mirror layer 1', { timeout: 60_000 }, () => {
    // Truths drawn from the priors (the Bayesian bound: prior information added to the Fisher
    // information): the film's index, the rate, the gain and offset; noise 0.1 %, 10 Hz.
    const mirror = loadRecipe(join(root, 'config/recipes/mirror-1064.yaml'));
    const layer = mirror.layers[0]!;
    const rate = layer.rateNmPerS * layer.chipRatio;
    const target = layer.targetNm * layer.chipRatio;
    const nominal = mirror.layers.map((l) => l.targetNm);
    const model = chipMonitorFor(mirror, 0, nominal);
    const plus = chipMonitorFor(mirror, 0, nominal, { growingIndexFactor: 1.01 });
    const minus = chipMonitorFor(mirror, 0, nominal, { growingIndexFactor: 0.99 });
    const sigma = 0.03;
    const bound = layerPrecision(model, { plus, minus, delta: 0.01, sigma }, [], target, rate, HZ, NOISE, DEFAULT_PRIORS).cutNm;
    const table = layerSignalTable(model, target);
    const indexTables = buildIndexTables(table, plus, minus, 0.01);
    let seed = 11;
    const gauss = (): number => {
      seed = (seed * 16807) % 2147483647;
      const u = seed / 2147483647;
      seed = (seed * 16807) % 2147483647;
      return Math.sqrt(-2 * Math.log(u)) * Math.cos((2 * Math.PI * seed) / 2147483647);
    };
    const runs = 40;
    let sq = 0;
    for (let run = 0; run < runs; run++) {
      const kappa = 1 + sigma * gauss();
      const r = rate * (1 + DEFAULT_PRIORS.rateSigmaFraction * gauss());
      const g = 1 + DEFAULT_PRIORS.gainSigma * gauss();
      const o = DEFAULT_PRIORS.offsetSigma * gauss();
      const truth = chipMonitorFor(mirror, 0, nominal, { growingIndexFactor: kappa });
      const fit = createLayerFit({ monitor: model, table, indexTables, indexSigma: sigma, targetNm: target, rateNmPerS: rate, ...DEFAULT_PRIORS, noise: NOISE });
      const tCut = target / r;
      for (let k = 1; k / HZ <= tCut; k++) {
        // u = r t grows at the true rate; the film is u/κ thick at index κ·n.
        fit.add(k / HZ, g * truth.signalAt((r * k) / HZ / kappa) + o + NOISE * gauss());
        fit.update();
      }
      for (let n = 0; n < 20; n++) fit.update();
      sq += (fit.estimate(tCut).thicknessNm - r * tCut) ** 2;
    }
    const rmsNm = Math.sqrt(sq / runs);
    // 40 runs: the rms is known to ±11 % (1σ); the bound with κ is well above the one without.
    expect(rmsNm / bound).toBeGreaterThan(0.7);
    expect(rmsNm / bound).toBeLessThan(1.35);
    const plan = planRun(mirror, { suggest: 'none' });
    expect(bound / layer.chipRatio).toBeCloseTo(plan.layers[0]!.stackPrecisionNm, 6);
    expect(plan.layers[0]!.stackPrecisionNm).toBeGreaterThan(1.2 * plan.layers[0]!.precisionNm);
  });

  it('the figure never falls below the noise bound, and a layer not cut by the fit keeps its own', () => {
    const plan = planRun(edge, { suggest: 'none' });
    for (const l of plan.layers) {
      expect(l.stackPrecisionNm, `layer ${l.number}`).toBeGreaterThanOrEqual(l.precisionNm);
      if (l.cut === 'crystal' || l.cut === 'time') expect(l.stackPrecisionNm).toBe(l.precisionNm);
    }
    // Layer 2 sits on a crystal layer known to 1 %: its figure grows; off, it is the noise bound.
    const off = planRun(edge, { suggest: 'none', stackPrecision: false });
    expect(plan.layers[1]!.stackPrecisionNm).toBeGreaterThan(plan.layers[1]!.precisionNm);
    off.layers.forEach((l) => expect(l.stackPrecisionNm).toBe(l.precisionNm));
  });
});
