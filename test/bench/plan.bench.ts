/**
 * plan.run40: the full plan of a 40-layer recipe, curves every 0.1 nm, wavelength suggestion over
 * 400–1000 nm in 1 nm steps (goal < 500 ms). plan.replan40: the remaining layers after a cut
 * half-way, with achieved thicknesses, no search (goal < 20 ms).
 */
import { planRun } from '../../src/model/plan/plan.ts';
import { recipe40 } from './fixtures.ts';
import { timeLoop, type Benchmark, type BenchResult } from './harness.ts';

export const planBenchmarks: Benchmark[] = [
  {
    name: 'plan.run40',
    run(): BenchResult[] {
      const recipe = recipe40();
      const { secondsPerCall } = timeLoop(() => planRun(recipe, { curveStepNm: 0.1, searchStepNm: 1, suggest: 'per-layer' }), 5, 2);
      return [{ name: 'plan.run40', value: secondsPerCall * 1e3, unit: 'ms', note: 'goal < 500 ms' }];
    },
  },
  {
    name: 'plan.replan40',
    run(): BenchResult[] {
      const recipe = recipe40();
      // Layers 1–20 done, each 1 % thick: re-plan 21–40, as the controller does (without the stack figure).
      const achievedNm = recipe.layers.slice(0, 20).map((l) => l.targetNm * 1.01);
      const { secondsPerCall } = timeLoop(() => planRun(recipe, { achievedNm, suggest: 'none', stackPrecision: false }), 3, 5);
      return [{ name: 'plan.replan40', value: secondsPerCall * 1e3, unit: 'ms', note: 'goal < 20 ms (layers 21–40)' }];
    },
  },
];
