// The chip refit: every layer of a chip fitted together from binned readings on the crystal's
// clock. Checked against readings made from the true chip (the optics kernel with the true
// indices and thicknesses), where a layer fitted alone on wrong estimates below goes astray.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { refitChip, type RefitLayer } from '../../../src/model/estimate/index.ts';
import { chipMonitorFor } from '../../../src/model/plan/plan.ts';

const root = fileURLToPath(new URL('../../../', import.meta.url));
const edge = loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'));

// The truth: indices 1.4 % (SiO2) and 1.8 % (TiO2) above the design's, each layer closed
// somewhat off its target; the crystal's clock is the physical thickness over the planned rate,
// so u = κ·d grows at ρ = κ times the planned chip rate.
const kappa: Record<string, number> = { SiO2: 1.014, TiO2: 1.018 };
const closeError = [0.012, -0.02, 0.015, -0.008, 0.01, -0.005];
const layers = edge.layers.slice(0, closeError.length);
const trueChipNm = layers.map((l, j) => l.targetNm * l.chipRatio * (1 + (closeError[j] as number)));
const truePartNm = layers.map((l, j) => (trueChipNm[j] as number) / l.chipRatio);
const trueIndex = layers.map((l) => kappa[l.materialName] as number);

/** Gaussian deviates, Park–Miller with Box–Muller (test noise only). */
function gaussian(seed: number): () => number {
  let s = seed;
  return () => {
    s = (s * 16807) % 2147483647;
    const u = s / 2147483647;
    s = (s * 16807) % 2147483647;
    return Math.sqrt(-2 * Math.log(u)) * Math.cos((2 * Math.PI * s) / 2147483647);
  };
}

function records(noise: number, count: number, seed = 7): RefitLayer[] {
  const gauss = gaussian(seed);
  return layers.slice(0, count).map((l, j) => {
    const rate = l.rateNmPerS * l.chipRatio;
    const closeClock = (trueChipNm[j] as number) / rate;
    const monitor = chipMonitorFor(edge, j, truePartNm, { indexFactors: trueIndex, growingIndexFactor: trueIndex[j] as number });
    // 60 bins while growing and 6 after the close, 50 readings each (10 Hz), as the controller keeps them.
    const clocks: number[] = [];
    const values: number[] = [];
    const weights: number[] = [];
    for (let b = 0; b < 66; b++) {
      const clock = b < 60 ? ((b + 0.5) / 60) * closeClock : closeClock + (b - 59) * 2;
      clocks.push(clock);
      values.push(monitor.signalAt(rate * Math.min(clock, closeClock)) + (noise / Math.sqrt(50)) * gauss());
      weights.push(50);
    }
    return { index: j, clocks: Float64Array.from(clocks), values: Float64Array.from(values), weights: Float64Array.from(weights), closeClock };
  });
}

const options = {
  noise: 0.001,
  fixedPartNm: [],
  fixedIndexFactors: [],
  ratePriors: {},
  indexPriors: {},
  defaultRateSigma: 0.05,
  defaultIndexSigma: 0.03,
  startSigmaNm: 0.5,
  rateSpread: 0.003,
  gainSigma: 0.01,
  offsetSigma: 0.005,
};

describe('refitChip', () => {
  it('recovers every layer’s optical thickness and both indices from six layers of one chip', () => {
    const result = refitChip(edge, records(0.001, 6), options);
    expect(result.layers).toHaveLength(6);
    result.layers.forEach((l, j) => {
      const trueOptical = (truePartNm[j] as number) * (trueIndex[j] as number);
      // Within 3σ of its own stated precision, and that precision a small fraction of a per cent.
      expect(Math.abs(l.opticalNm - trueOptical), `layer ${j + 1}`).toBeLessThan(3 * l.opticalSigmaNm + 1e-3);
      // Layer 1, SiO2 on N-BK7, barely changes the signal: its thickness rests on the crystal and ρ.
      expect(l.opticalSigmaNm / trueOptical, `layer ${j + 1}`).toBeLessThan(j === 0 ? 0.01 : 0.005);
    });
    for (const name of ['SiO2', 'TiO2']) {
      const estimate = result.index[name];
      expect(Math.abs((estimate?.factor ?? 0) - (kappa[name] as number)), name).toBeLessThan(3 * (estimate?.sigma ?? 0) + 1e-4);
      expect(Math.abs((result.rate[name]?.factor ?? 0) - (kappa[name] as number)), name).toBeLessThan(0.003);
    }
    // The model holds: the weighted residuals are the noise.
    expect(result.residualRatio).toBeGreaterThan(0.8);
    expect(result.residualRatio).toBeLessThan(1.25);
  });

  it('with noise-free readings the fit is exact to the priors’ pull', () => {
    const result = refitChip(edge, records(1e-7, 4), { ...options, noise: 1e-6 });
    result.layers.forEach((l, j) => {
      const trueOptical = (truePartNm[j] as number) * (trueIndex[j] as number);
      expect(Math.abs(l.opticalNm / trueOptical - 1), `layer ${j + 1}`).toBeLessThan(2e-5);
    });
  });

  it('starts from the priors it is given: a tight wrong prior of ρ pulls, a loose one does not', () => {
    const loose = refitChip(edge, records(0.001, 3), options);
    const wrong = { SiO2: { factor: 1.05, sigma: 1e-5 }, TiO2: { factor: 1.05, sigma: 1e-5 } };
    const pulled = refitChip(edge, records(0.001, 3), { ...options, ratePriors: wrong });
    expect(Math.abs((loose.rate.SiO2?.factor ?? 0) - 1.014)).toBeLessThan(0.005);
    expect(Math.abs((pulled.rate.SiO2?.factor ?? 0) - 1.05)).toBeLessThan(1e-4);
  });

  it('an empty chip gives nothing', () => {
    expect(refitChip(edge, [], options).layers).toEqual([]);
  });
});
