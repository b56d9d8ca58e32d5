/**
 * `npm run bench [-- GROUP ...]`: runs the benchmarks (all, or those whose name starts with a
 * given group), prints each figure and writes test/bench/results.json as a list of
 * {"name", "value", "unit"}.
 */
import { writeFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import type { Benchmark, BenchResult } from './harness.ts';
import { broadbandBenchmarks } from './broadband.bench.ts';
import { calibrateBenchmarks } from './calibrate.bench.ts';
import { opticsBenchmarks } from './optics.bench.ts';
import { planBenchmarks } from './plan.bench.ts';
import { pipelineBenchmarks } from './pipeline.bench.ts';
import { plantBenchmarks } from './plant.bench.ts';
import { serverBenchmarks } from './server.bench.ts';
import { simBenchmarks } from './sim.bench.ts';

const all: Benchmark[] = [...opticsBenchmarks, ...planBenchmarks, ...simBenchmarks, ...pipelineBenchmarks, ...broadbandBenchmarks, ...serverBenchmarks, ...calibrateBenchmarks, ...plantBenchmarks];

const groups = process.argv.slice(2);
const selected = groups.length === 0 ? all : all.filter((b) => groups.some((g) => b.name === g || b.name.startsWith(`${g}.`)));
if (selected.length === 0) {
  console.error(`no benchmark matches ${groups.join(', ')}; there are: ${all.map((b) => b.name).join(', ')}`);
  process.exit(2);
}

const results: BenchResult[] = [];
for (const bench of selected) {
  console.log(`running ${bench.name} ...`);
  for (const r of await bench.run()) {
    results.push(r);
    console.log(`  ${r.name.padEnd(44)} ${formatValue(r.value).padStart(12)} ${r.unit}${r.note ? `   (${r.note})` : ''}`);
  }
}
const file = fileURLToPath(new URL('./results.json', import.meta.url));
writeFileSync(file, `${JSON.stringify(results.map(({ name, value, unit }) => ({ name, value, unit })), null, 2)}\n`);
console.log(`wrote ${file}`);

function formatValue(v: number): string {
  return Math.abs(v) >= 1e5 ? v.toExponential(3) : v.toPrecision(4);
}
