/**
 * plant.publish: decision latency with the run published to the plant's broker. The inputs of
 * a simulated AR run with a 1 kHz optical monitor are fed at real time (from 115 s of run time,
 * so that cuts fall inside) to the controller and a run hub, the way `fringe run` feeds them; the
 * loop yields to the event loop between steps, where the publisher flushes and the client
 * writes. Per reading: the decision (controller step and hub feed, the publisher's listener
 * included), and the lateness from when it was due to when it was decided (every wait the event
 * loop added). p50 and p99 in µs for three phases: no publisher, publishing to mosquitto
 * (readings at the highest rate, 30 a second per channel), and a broker that is down (nothing
 * listening: messages queue). Goal: decision p99 < 1000 µs.
 * FRINGE_PLANT_S seconds per phase (default 15). Without mosquitto the middle phase is left out.
 */
import { createVirtualChamber } from '../../sim/index.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { createSteppedRun } from '../../src/pipeline/run-stepped.ts';
import type { PipelineInput } from '../../src/pipeline/types.ts';
import { createPlantPublisher, type PlantStats } from '../../src/plant/plant-publisher.ts';
import { PlantSettingsSchema } from '../../src/plant/plant-settings.ts';
import { createRunHub } from '../../src/server/run-hub.ts';
import { ar4, typical, withOpticalRate } from '../server/support.ts';
import { freePort, haveMosquitto, startTestBroker } from '../support/broker.ts';
import type { Benchmark, BenchResult } from './harness.ts';

const OFFSET_S = 115;

/** The inputs the AR run with a 1 kHz optical monitor feeds its controller, up to `untilS`. */
function recordInputs(untilS: number): PipelineInput[] {
  const inputs: PipelineInput[] = [];
  const run = createSteppedRun(createController(ar4, { estimator: 'plain' }), createVirtualChamber(ar4, withOpticalRate(typical, 1000), 1), { onInput: (i) => inputs.push(i) });
  run.runUntil(untilS);
  return inputs;
}

interface Phase {
  /** Per reading: controller step and hub feed (the publisher's listener included), µs. */
  decisionUs: Float64Array;
  /** Per reading: from when it was due to when it was decided, µs. */
  latenessUs: Float64Array;
  stats: PlantStats | null;
  cuts: number;
}

async function phase(inputs: readonly PipelineInput[], url: string | null, seconds: number): Promise<Phase> {
  const controller = createController(ar4, { estimator: 'plain' });
  let state = controller.initial();
  const hub = createRunHub({ recipe: ar4, source: 'live', runId: 'bench', speed: null });
  hub.attach({
    get state() {
      return state;
    },
    get nowS() {
      return Number.isFinite(state.nowS) ? state.nowS : 0;
    },
    running: true,
    apply: () => undefined,
  });
  const publisher = url === null ? null : createPlantPublisher({ settings: PlantSettingsSchema.parse({ url, readingsPerS: 30 }), chamber: 'bench', hub, raise: hub.feed.event });
  const decide = (input: PipelineInput): number => {
    hub.feed.input(input);
    const r = controller.step(state, input);
    state = r.state;
    let cuts = 0;
    for (const e of r.events) {
      if (e.type === 'cut') cuts++;
      hub.feed.event(e);
    }
    return cuts;
  };
  // A fault carries no run time: it is due with the input before it.
  let last = 0;
  const dueS = inputs.map((input) => (last = 'timeS' in input ? input.timeS : last));
  let i = 0;
  for (; i < inputs.length && (dueS[i] as number) < OFFSET_S; i++) decide(inputs[i] as PipelineInput);
  await new Promise((r) => setTimeout(r, 500)); // the publisher connects
  const decision: number[] = [];
  const lateness: number[] = [];
  let cuts = 0;
  const startMs = performance.now();
  const endS = OFFSET_S + seconds;
  while (i < inputs.length && (dueS[i] as number) < endS) {
    const nowS = OFFSET_S + (performance.now() - startMs) / 1000;
    for (; i < inputs.length && (dueS[i] as number) <= nowS; i++) {
      const input = inputs[i] as PipelineInput;
      const t0 = performance.now();
      cuts += decide(input);
      const t1 = performance.now();
      if (input.kind !== 'reading') continue;
      decision.push((t1 - t0) * 1000);
      lateness.push((t1 - (startMs + (input.timeS - OFFSET_S) * 1000)) * 1000);
    }
    // The event loop turns between steps, as between a live run's reads: the publisher flushes here.
    await new Promise((r) => setImmediate(r));
  }
  const stats = publisher ? publisher.stats() : null;
  await publisher?.close(1000);
  return { decisionUs: Float64Array.from(decision).sort(), latenessUs: Float64Array.from(lateness).sort(), stats, cuts };
}

const pct = (sorted: Float64Array, p: number): number => sorted[Math.min(sorted.length - 1, Math.floor(p * sorted.length))] as number;

export const plantBenchmarks: Benchmark[] = [
  {
    name: 'plant.publish',
    async run(): Promise<BenchResult[]> {
      const seconds = Number(process.env.FRINGE_PLANT_S ?? 15);
      const results: BenchResult[] = [];
      const inputs = recordInputs(OFFSET_S + seconds);
      const report = (label: string, r: Phase, what: string): void => {
        const note = `${r.decisionUs.length} readings, ${r.cuts} cuts, ${what}${r.stats ? `; ${r.stats.acknowledged} acknowledged, ${r.stats.readings} readings sent, ${r.stats.waiting} waiting` : ''}`;
        results.push({ name: `plant.publish.${label}.decision.p50`, value: pct(r.decisionUs, 0.5), unit: 'µs', note });
        results.push({ name: `plant.publish.${label}.decision.p99`, value: pct(r.decisionUs, 0.99), unit: 'µs', note: 'goal < 1000 µs' });
        results.push({ name: `plant.publish.${label}.lateness.p99`, value: pct(r.latenessUs, 0.99), unit: 'µs', note: 'from due to decided: includes every wait in the event loop' });
      };
      report('off', await phase(inputs, null, seconds), 'no publisher');
      if (haveMosquitto) {
        const broker = await startTestBroker();
        try {
          report('broker', await phase(inputs, broker.url, seconds), 'publishing to mosquitto');
        } finally {
          await broker.stop();
        }
      }
      report('down', await phase(inputs, `mqtt://127.0.0.1:${await freePort()}`, seconds), 'the broker down');
      return results;
    },
  },
];
