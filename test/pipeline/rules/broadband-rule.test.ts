// The broadband fit as a controller part, judged on a layer's present built by hand: started from
// a recipe and the chip as estimated, fed spectra of the shipped edge filter's layer 6 on its chip
// with 0.2 % noise, asked for its estimate and its cut at every spectrum.
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { createRandomStream } from '../../../sim/random.ts';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { buildBroadbandChip } from '../../../src/model/estimate/index.ts';
import { broadbandChipFor } from '../../../src/model/plan/broadband-plan.ts';
import { planRun, type LayerPlan } from '../../../src/model/plan/plan.ts';
import { DEFAULT_INDEX_SIGMA } from '../../../src/model/plan/stack-precision.ts';
import { broadbandRule, readBroadband, startBroadband, type BroadbandRun } from '../../../src/pipeline/estimators/broadband-fit.ts';
import type { LayerNow } from '../../../src/pipeline/rules/cut-rule.ts';

const edge = loadRecipe(fileURLToPath(new URL('../../../config/recipes/edge-longpass-visible.yaml', import.meta.url)));
const plan = planRun(edge, { suggest: 'none', stackPrecision: false });
const INDEX = 5; // layer 6: TiO2 on chip A over five finished layers
const layerPlan = plan.layers[INDEX] as LayerPlan;
const layer = edge.layers[INDEX] as (typeof edge.layers)[number];
const GRID = Float64Array.from({ length: 251 }, (_, i) => 400 + 2 * i); // the grid
const NOISE = 0.002;
const RATE_HZ = 5;

function start(): BroadbandRun {
  return startBroadband(
    {
      recipe: edge,
      index: INDEX,
      plan: layerPlan,
      stack: { partNm: edge.layers.map((l) => l.targetNm), indexFactors: edge.layers.map(() => 1) },
      materialIndex: {},
      materialRate: {},
      wavelengthsNm: GRID,
      noise: NOISE,
      sampleRateHz: RATE_HZ,
      indexSigma: DEFAULT_INDEX_SIGMA,
    },
    'time',
  );
}

/** The layer at elapsed time t on the clock at the planned rate (the crystal silent). */
function present(elapsedS: number, changes: Partial<LayerNow> = {}): LayerNow {
  const thicknessNm = layer.rateNmPerS * elapsedS;
  return {
    plan: layerPlan,
    layer,
    mode: 'level',
    sampleRateHz: RATE_HZ,
    nowS: elapsedS,
    elapsedS,
    thicknessNm,
    crystalNm: Number.NaN,
    rateNmPerS: layer.rateNmPerS,
    delayNm: layer.rateNmPerS * layer.shutterDelayS,
    armed: thicknessNm >= 0.7 * layerPlan.targetNm,
    crystalSilent: true,
    ...changes,
  };
}

describe('the broadband rule', () => {
  const truth = buildBroadbandChip(broadbandChipFor(edge, INDEX, edge.layers.map((l) => l.targetNm)), GRID);

  it('estimates the layer with an honest σ as it grows and cuts once, one shutter delay ahead of the target', () => {
    const run = start();
    expect(run.plan.window.count).toBeGreaterThan(50);
    const random = createRandomStream(6, 'broadband-rule');
    const clean = new Float64Array(GRID.length);
    const y = new Float64Array(GRID.length);
    const chipRate = layer.rateNmPerS * layer.chipRatio;
    let cutAtS = Number.NaN;
    let estimatedNm = Number.NaN;
    const zs: number[] = [];
    for (let j = 1; j < 10000 && Number.isNaN(cutAtS); j++) {
      const t = j / RATE_HZ;
      truth.spectrum(clean, chipRate * t * 1.01, 1.01); // u = κ·d; the film 1 % denser than designed
      for (let w = 0; w < GRID.length; w++) y[w] = (clean[w] as number) + NOISE * random.gaussian();
      expect(readBroadband(run, GRID, y, t)).not.toBeNull();
      const now = present(t);
      const e = broadbandRule.estimate({ run, clockS: t }, now);
      if (j < 3) expect(e).toBeNull();
      else if (e) zs.push((e.thicknessNm * layer.chipRatio - chipRate * t * 1.01) / (e.sigmaNm * layer.chipRatio));
      // Not armed: never a cut.
      expect(broadbandRule.decide({ run, clockS: t }, present(t, { armed: false }))).toBeNull();
      const cut = broadbandRule.decide({ run, clockS: t }, now);
      if (cut) {
        cutAtS = t;
        estimatedNm = cut.estimatedNm;
        expect(cut.reason).toBe('model-fit');
      }
    }
    // The close, one delay after the cut, lands within half a spectrum's growth of the target (u).
    const closeU = chipRate * 1.01 * (cutAtS + layer.shutterDelayS);
    expect(Math.abs(closeU - layerPlan.chipTargetNm)).toBeLessThan(0.5 * chipRate * 1.01 / RATE_HZ + 4 * run.plan.boundNm);
    // It records the physical thickness at the close, u/κ: within 4σ of the truth, σ from u's and κ's.
    const atClose = run.fit.estimate(cutAtS + layer.shutterDelayS);
    const trueNm = chipRate * (cutAtS + layer.shutterDelayS);
    expect(Math.abs(estimatedNm * layer.chipRatio - trueNm)).toBeLessThan(4 * (atClose.sigmaNm + trueNm * atClose.indexSigma));
    // The estimate's σ is honest: rms z over the layer within 0.6–1.6 (successive estimates are correlated).
    const rmsZ = Math.sqrt(zs.reduce((s, z) => s + z * z, 0) / zs.length);
    console.log(`broadband rule on edge layer 6: window ${run.plan.window.count} wavelengths, bound ${run.plan.boundNm.toFixed(4)} nm, close off the target by ${(closeU - layerPlan.chipTargetNm).toFixed(4)} nm, rms z ${rmsZ.toFixed(2)}`);
    expect(rmsZ).toBeGreaterThan(0.6);
    expect(rmsZ).toBeLessThan(1.6);
  });

  it('a spectrum on another grid is not used (a fault for the channel)', () => {
    const run = start();
    const other = Float64Array.from(GRID, (w) => w + 1);
    expect(readBroadband(run, other, new Float64Array(GRID.length).fill(0.5), 1)).toBeNull();
    expect(readBroadband(run, GRID.subarray(1), new Float64Array(GRID.length - 1).fill(0.5), 1)).toBeNull();
    expect(run.fit.estimate(1).spectra).toBe(0);
  });
});
