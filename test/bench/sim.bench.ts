/**
 * Simulator speed: a 40-layer, about 4-hour run with 100 Hz optical and 10 Hz crystal readings
 * under the typical profile, driven by a clock controller (each layer open for its planned
 * duration, then closed, 1 s between layers). Reports readings per second and the multiple of
 * real time. sim.run40 runs the same recipe through the whole pipeline (the controller cutting
 * every layer, re-planning after each) at maximal speed: goal ≥ 2,000× real time.
 */
import { fileURLToPath } from 'node:url';
import { createVirtualChamber, SimProfileSchema } from '../../sim/index.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { runStepped } from '../../src/pipeline/run-stepped.ts';
import { fortyLayerRecipe, profiles } from '../sim/support.ts';
import type { Benchmark, BenchResult } from './harness.ts';

/** One full run; returns what was produced and how long it took. */
export function fortyLayerRun(seed = 1): { readings: number; optical: number; simulatedS: number; wallS: number } {
  const recipe = fortyLayerRecipe(100, 10);
  const profile = SimProfileSchema.parse({ ...profiles.typical, optical: { ...profiles.typical.optical, sampleRateHz: 100 } });
  const chamber = createVirtualChamber(recipe, profile, seed);
  let readings = 0;
  let optical = 0;
  const sink = (r: { channel: string }): void => {
    readings++;
    if (r.channel === 'optical') optical++;
  };
  const start = process.hrtime.bigint();
  let t = 0;
  for (const layer of recipe.layers) {
    chamber.command({ kind: 'shutter', action: 'open', source: layer.materialName, layer: layer.number, timeS: t });
    t += layer.targetNm / layer.rateNmPerS;
    chamber.advance(t, sink);
    chamber.command({ kind: 'shutter', action: 'close', source: layer.materialName, layer: layer.number, timeS: t });
    t += 1;
    chamber.advance(t, sink);
  }
  const wallS = Number(process.hrtime.bigint() - start) / 1e9;
  return { readings, optical, simulatedS: t, wallS };
}

export const simBenchmarks: Benchmark[] = [
  {
    name: 'sim.forty-layers',
    run(): BenchResult[] {
      fortyLayerRun(0); // warm-up
      const r = fortyLayerRun(1);
      const note = `${r.readings} readings, ${(r.simulatedS / 3600).toFixed(2)} h simulated in ${r.wallS.toFixed(2)} s`;
      return [
        { name: 'sim.forty-layers.readings-per-s', value: r.readings / r.wallS, unit: 'readings/s', note },
        { name: 'sim.forty-layers.real-time-multiple', value: r.simulatedS / r.wallS, unit: '× real time', note: 'goal for the whole pipeline: 2000×' },
      ];
    },
  },
  {
    name: 'sim.run40',
    run(): BenchResult[] {
      const recipe = fortyLayerRecipe(100, 10);
      const profile = SimProfileSchema.parse({ ...profiles.typical, optical: { ...profiles.typical.optical, sampleRateHz: 100 } });
      const once = (seed: number): { simulatedS: number; wallS: number; readings: number } => {
        const chamber = createVirtualChamber(recipe, profile, seed);
        let readings = 0;
        const start = process.hrtime.bigint();
        const state = runStepped(createController(recipe), chamber, { onInput: (i) => void (i.kind === 'reading' && readings++) });
        return { simulatedS: state.nowS, wallS: Number(process.hrtime.bigint() - start) / 1e9, readings };
      };
      once(0); // warm-up
      const r = once(1);
      return [
        {
          name: 'sim.run40',
          value: r.simulatedS / r.wallS,
          unit: '× real time',
          note: `${r.readings} readings, ${(r.simulatedS / 3600).toFixed(2)} h simulated in ${r.wallS.toFixed(2)} s through the pipeline; goal ≥ 2000×`,
        },
      ];
    },
  },
];

if (process.argv[1] === fileURLToPath(import.meta.url)) {
  for (const bench of simBenchmarks) for (const r of bench.run() as BenchResult[]) console.log(`${r.name.padEnd(40)} ${r.value.toExponential(3)} ${r.unit}  (${r.note ?? ''})`);
}
