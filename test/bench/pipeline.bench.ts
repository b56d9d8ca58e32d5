/**
 * pipeline.latency: the time from a reading's bytes reaching the driver (the framer) to the
 * cut command handed to the shutter port, for a simulated run with a 1 kHz optical monitor:
 * framer → decoder → controller → command text, all on one thread. p50 and p99 over every
 * reading, and over the readings that cut, in µs (goal: p99 < 1 ms). The operating system's
 * serial latency is outside it. pipeline.latency.fit: the same with the model fit cutting
 * (a run recorded with it, so that its cuts are the chamber's): its Gauss–Newton update runs on
 * every optical reading, its chip refit once a layer, at the layer's end.
 *
 * pipeline.replay: readings per second through the controller with the plain rules, replaying
 * the inputs of a simulated 40-layer run (goal > 1e6/s).
 */
import { FRINGE_DIALECT, createLineDecoder, createLineFramer } from '../../drivers/index.ts';
import { createVirtualChamber, formatReading, SimProfileSchema } from '../../sim/index.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { createSteppedRun } from '../../src/pipeline/run-stepped.ts';
import type { PipelineInput } from '../../src/pipeline/types.ts';
import { fortyLayerRecipe, profiles } from '../sim/support.ts';
import type { Benchmark, BenchResult } from './harness.ts';

function percentile(sorted: Float64Array, p: number): number {
  return sorted[Math.min(sorted.length - 1, Math.floor(p * sorted.length))] as number;
}

/** The inputs a simulated run feeds its controller, recorded. */
function recordRun(recipe: ResolvedRecipe, opticalHz: number, seed: number, estimator: 'plain' | 'fit' = 'plain'): PipelineInput[] {
  const profile = SimProfileSchema.parse({ ...profiles.typical, optical: { ...profiles.typical.optical, sampleRateHz: opticalHz } });
  const inputs: PipelineInput[] = [];
  const run = createSteppedRun(createController(recipe, { estimator }), createVirtualChamber(recipe, profile, seed), { onInput: (i) => inputs.push(i) });
  run.runUntil(Number.POSITIVE_INFINITY);
  return inputs;
}

/** Bytes to command for every reading of the first 8 layers of the 40-layer recipe at 1 kHz optical. */
function latency(estimator: 'plain' | 'fit'): BenchResult[] {
  // About 1.3 million readings.
  const full = fortyLayerRecipe(1000, 10);
  const recipe = { ...full, layers: full.layers.slice(0, 8), design: { ...full.design, layers: full.design.layers.slice(0, 8), stack: { ...full.design.stack, layers: full.design.stack.layers.slice(0, 8) } } };
  const inputs = recordRun(recipe, 1000, 3, estimator);
  const lines = inputs.map((i): Buffer | PipelineInput => (i.kind === 'reading' ? Buffer.from(formatReading(i)) : i));
  const framer = createLineFramer();
  const decode = createLineDecoder(FRINGE_DIALECT);
  const controller = createController(recipe, { estimator });
  let state = controller.initial();
  const all = new Float64Array(lines.length);
  const cuts: number[] = [];
  let n = 0;
  let sent = '';
  for (const item of lines) {
    const t0 = process.hrtime.bigint();
    let cut = false;
    const feed = (input: PipelineInput): void => {
      const r = controller.step(state, input);
      state = r.state;
      for (const e of r.events) {
        if (e.type === 'shutter') sent = `SHUTTER ${e.command.source} ${e.command.action === 'open' ? 'OPEN' : 'CLOSE'} ${e.command.layer}\n`;
        if (e.type === 'cut') cut = true;
      }
    };
    if (Buffer.isBuffer(item)) {
      for (const line of framer.push(item, 0)) {
        if (typeof line !== 'string') continue;
        const reading = decode(line, 0);
        if (reading && reading.kind === 'reading') feed({ ...reading, arrivalS: reading.timeS });
      }
      const us = Number(process.hrtime.bigint() - t0) / 1000;
      all[n++] = us;
      if (cut) cuts.push(us);
    } else feed(item);
  }
  const sorted = all.subarray(0, n).sort();
  const cutSorted = Float64Array.from(cuts).sort();
  const name = estimator === 'fit' ? 'pipeline.latency.fit' : 'pipeline.latency';
  const note = `${n} readings at 1 kHz, ${cuts.length} cuts (${estimator}); last command ${JSON.stringify(sent.trim())}`;
  return [
    { name: `${name}.p50`, value: percentile(sorted, 0.5), unit: 'µs', note },
    { name: `${name}.p99`, value: percentile(sorted, 0.99), unit: 'µs', note: 'goal < 1000 µs' },
    { name: `${name}.max`, value: sorted[sorted.length - 1] as number, unit: 'µs', note: 'the slowest reading: a layer end, where the re-plan (and the fit\'s chip refit) runs' },
    { name: `${name}.cut.max`, value: cutSorted.length ? (cutSorted[cutSorted.length - 1] as number) : Number.NaN, unit: 'µs', note: 'the readings that cut' },
  ];
}

export const pipelineBenchmarks: Benchmark[] = [
  { name: 'pipeline.latency', run: () => latency('plain') },
  { name: 'pipeline.latency.fit', run: () => latency('fit') },
  {
    name: 'pipeline.replay',
    run(): BenchResult[] {
      const recipe = fortyLayerRecipe(100, 10);
      const inputs = recordRun(recipe, 100, 1);
      const readings = inputs.filter((i) => i.kind === 'reading').length;
      // Without the re-plan after each layer the figure is the decision path alone; with it, the
      // whole replay.
      const time = (replan: boolean): number => {
        const controller = createController(recipe, { replan });
        let state = controller.initial();
        const start = process.hrtime.bigint();
        for (const input of inputs) state = controller.step(state, input).state;
        return Number(process.hrtime.bigint() - start) / 1e9;
      };
      time(false); // warm-up
      const plain = time(false);
      const withReplan = time(true);
      return [
        { name: 'pipeline.replay', value: readings / plain, unit: 'readings/s', note: `${readings} readings; plain rules, goal > 1e6/s` },
        { name: 'pipeline.replay.with-replan', value: readings / withReplan, unit: 'readings/s', note: 'plus a re-plan of the remaining layers after every layer' },
      ];
    },
  },
];
