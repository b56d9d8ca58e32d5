/**
 * server.fanout: 20 WebSocket viewers on a simulated run with a 1 kHz optical channel at real
 * time. Reports the share of a core the viewers cost (process CPU with 20 viewers less without,
 * over the same run time), the heap's growth per minute while they watch, and the per-reading
 * decision time with the viewers attached (p99 over 50 ms chunks; the cut goes out inside it).
 * The heap is measured after a full collection (npm run bench passes --expose-gc).
 * Goals: cut latency p99 < 1 ms, viewers < 10 % of a core, memory flat. Runs
 * FRINGE_FANOUT_S seconds per phase (default 20; the goal speaks of ten minutes: set 600).
 */
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import WebSocket from 'ws';
import { loadSimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { buildServer } from '../../src/server/build-server.ts';
import { startSimulatedRun } from '../../src/server/simulated-run.ts';
import type { Benchmark, BenchResult } from './harness.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));

async function phase(viewers: number, seconds: number): Promise<{ cpuShare: number; heapMbPerMin: number; chunkPerReadingUs: number[]; messages: number }> {
  const recipe = loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'));
  const base = loadSimProfile(join(root, 'config/sim/typical.yaml'));
  const profile = { ...base, optical: { ...base.optical, sampleRateHz: 1000 } };
  const stop = new AbortController();
  const sim = startSimulatedRun({ recipe, profile, seed: 1, speed: 1, signal: stop.signal, chunkS: 0.05 });
  const app = buildServer({ hub: sim.hub, runsDir: join(root, 'runs') }, { token: 'bench-token-bench-token', host: '127.0.0.1' });
  const address = await app.listen({ port: 0, host: '127.0.0.1' });
  const url = address.replace('http', 'ws') + '/api/live';
  let messages = 0;
  const sockets = await Promise.all(
    Array.from({ length: viewers }, () => new Promise<WebSocket>((resolve, reject) => {
      const ws = new WebSocket(url);
      ws.on('message', () => messages++);
      ws.once('open', () => resolve(ws));
      ws.once('error', reject);
    })),
  );
  // Per-reading decision time: wall time of each chunk over the readings in it.
  const chunkPerReadingUs: number[] = [];
  const origRunUntil = sim.run.runUntil.bind(sim.run);
  (sim.run as { runUntil: (t: number) => void }).runUntil = (t: number) => {
    const start = process.hrtime.bigint();
    const before = sim.run.state.nowS;
    origRunUntil(t);
    const readings = Math.max(1, Math.round((sim.run.state.nowS - before) * 1010));
    chunkPerReadingUs.push(Number(process.hrtime.bigint() - start) / 1000 / readings);
  };
  await new Promise((r) => setTimeout(r, 2000)); // settle
  global.gc?.();
  const heap0 = process.memoryUsage().heapUsed;
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  await new Promise((r) => setTimeout(r, seconds * 1000));
  const cpu = process.cpuUsage(cpu0);
  const wallS = (performance.now() - t0) / 1000;
  global.gc?.();
  const heap1 = process.memoryUsage().heapUsed;
  for (const ws of sockets) ws.close();
  stop.abort();
  await sim.done.catch(() => undefined);
  await app.close();
  return { cpuShare: (cpu.user + cpu.system) / 1e6 / wallS, heapMbPerMin: ((heap1 - heap0) / 1e6 / wallS) * 60, chunkPerReadingUs, messages };
}

export const serverBenchmarks: Benchmark[] = [
  {
    name: 'server.fanout',
    async run(): Promise<BenchResult[]> {
      const seconds = Number(process.env.FRINGE_FANOUT_S ?? 20);
      const alone = await phase(0, seconds);
      const watched = await phase(20, seconds);
      const sorted = [...watched.chunkPerReadingUs].sort((a, b) => a - b);
      const p99 = sorted[Math.floor(0.99 * (sorted.length - 1))] ?? Number.NaN;
      return [
        { name: 'server.fanout.viewers-cpu', value: 100 * (watched.cpuShare - alone.cpuShare), unit: '% of a core', note: `20 viewers, ${watched.messages} messages in ${seconds} s; goal < 10 %` },
        { name: 'server.fanout.heap-growth', value: watched.heapMbPerMin, unit: 'MB/min', note: `with 20 viewers (alone: ${alone.heapMbPerMin.toFixed(2)} MB/min); goal flat` },
        { name: 'server.fanout.decision-p99', value: p99, unit: 'µs per reading', note: 'per-reading time inside the paced chunks with 20 viewers; goal < 1000 µs' },
      ];
    },
  },
];
