/**
 * plan.propose40: `fringe plan --propose` on the 40-layer recipe (no tolerances: the expected
 * deviation over the monitor's range; one more chip allowed), the typical profile's indices
 * (goal < 30 s).
 * plan.run40: the full plan of a 40-layer recipe, curves every 0.1 nm, wavelength suggestion over
 * 400–1000 nm in 1 nm steps (goal < 500 ms). plan.replan40: the remaining layers after a cut
 * half-way, with achieved thicknesses, no search (goal < 20 ms).
 */
import { planRun } from '../../src/model/plan/plan.ts';
import { proposeStrategy } from '../../src/model/plan/propose.ts';
import { recipe40 } from './fixtures.ts';
import { timeLoop, type Benchmark, type BenchResult } from './harness.ts';

export const planBenchmarks: Benchmark[] = [
  {
    name: 'plan.propose40',
    run(): BenchResult[] {
      const recipe = recipe40();
      const start = process.hrtime.bigint();
      const cpu = process.cpuUsage();
      const proposal = proposeStrategy(recipe, { spread: { indexOffset: 0.01, indexCommonSigma: 0, indexMaterialSigma: 0.005 }, maxChips: recipe.chips.length + 1 });
      const seconds = Number(process.hrtime.bigint() - start) / 1e9;
      const used = process.cpuUsage(cpu);
      // The machine is shared: the processor time beside the wall time says what load added.
      const cpuSeconds = (used.user + used.system) / 1e6;
      return [{ name: 'plan.propose40', value: seconds, unit: 's', note: `goal < 30 s; ${cpuSeconds.toFixed(1)} s of processor time; ${proposal.changes.length} layers changed` }];
    },
  },
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
