// A monitor noisier than the recipe says: the fits of the layers after the first measure it from
// the readings, so that their spike and Huber thresholds (in units of the noise) keep the honest
// readings; within half again of the recipe's figure the recipe's stands.
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { createController, type Controller, type ControllerState } from '../../src/pipeline/controller.ts';
import { fitNoise, NOISIER_THAN_STATED } from '../../src/pipeline/estimators/model-fit.ts';
import { runIdeal } from '../support/ideal-chamber.ts';

const edge = loadRecipe(fileURLToPath(new URL('../../config/recipes/edge-longpass-visible.yaml', import.meta.url)));
const stated = edge.monitor.noisePercent / 100;

/** Edge layers 1–2 (crystal, then the first level layer) on the ideal chamber at `noise`; the state as layer 2 is cut. */
function atLayerTwoCut(noise: number): ControllerState {
  let atCut: ControllerState | null = null;
  const inner = createController(edge, { estimator: 'fit', replan: false });
  const watching: Controller = {
    ...inner,
    step(state, input) {
      const result = inner.step(state, input);
      if (result.events.some((e) => e.type === 'cut' && e.layer === 2)) atCut = result.state;
      return result;
    },
  };
  runIdeal(edge, watching, { noise, seed: 3, maxS: 280 });
  if (!atCut) throw new Error('layer 2 was not cut');
  return atCut;
}

describe('the monitor’s noise as measured', () => {
  it('five times the recipe’s: measured on layer 1, and layer 2’s fit flags almost none of its honest readings as spikes', () => {
    const s = atLayerTwoCut(5 * stated);
    expect(s.monitorNoise / (5 * stated)).toBeGreaterThan(0.9);
    expect(s.monitorNoise / (5 * stated)).toBeLessThan(1.1);
    const fit = s.fit?.fit.estimate(0);
    expect(fit?.readings).toBeGreaterThan(1000);
    // Spikes are readings beyond 8 spreads: for Gaussian noise at its true rms, practically none
    // (at the recipe's figure, beyond 1.6σ of the true noise: about a tenth).
    expect((fit?.spikes as number) / (fit?.readings as number)).toBeLessThan(0.005);
  });

  it('as the recipe says: the recipe’s figure stands', () => {
    const s = atLayerTwoCut(stated);
    expect(s.monitorNoise / stated).toBeGreaterThan(0.9);
    expect(s.monitorNoise / stated).toBeLessThan(1.1);
    expect(fitNoise(stated, s.monitorNoise)).toBe(stated);
  });

  it('takes the measured figure only beyond half again the stated one, and never a figure not measured', () => {
    expect(fitNoise(0.001, 0.0016)).toBe(0.0016);
    expect(fitNoise(0.001, 0.0014)).toBe(0.001);
    expect(fitNoise(0.001, 0.0005)).toBe(0.001);
    expect(fitNoise(0.001, Number.NaN)).toBe(0.001);
    expect(NOISIER_THAN_STATED).toBe(1.5);
  });
});
