/**
 * optics.spectrum.100x2000: a 100-layer stack with a weakly absorbing high-index material,
 * 2,000 wavelengths, 45°, s-polarised, in layer-wavelength evaluations per second; beside it the
 * same loop in plain scalar C (test/bench/native/spectrum-kernel.c) when a C compiler is present.
 */
import { execFileSync } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { buildOpticalModel, spectrum } from '../../src/model/optics/optical-model.ts';
import type { Dispersion } from '../../src/model/optics/dispersion.ts';
import { timeLoop, type Benchmark, type BenchResult } from './harness.ts';

const LAYERS = 100;
const POINTS = 2000;

function typescriptRate(): number {
  const H: Dispersion = { model: 'constant', n: 2.35, k: 2e-4 };
  const L: Dispersion = { model: 'constant', n: 1.46, k: 0 };
  const layers = Array.from({ length: LAYERS }, (_, j) => ({ dispersion: j % 2 === 0 ? H : L, thicknessNm: j % 2 === 0 ? 58.5 : 94.2 }));
  const grid = Float64Array.from({ length: POINTS }, (_, i) => 400 + 0.3 * i);
  const model = buildOpticalModel(
    { incident: { model: 'constant', n: 1, k: 0 }, layers, substrate: { model: 'constant', n: 1.52, k: 0 }, back: 'semi-infinite' },
    grid,
    45,
  );
  const out = { R: new Float64Array(POINTS), T: new Float64Array(POINTS), A: new Float64Array(POINTS) };
  const { secondsPerCall } = timeLoop(() => spectrum(out, model, 's'), 3);
  return (LAYERS * POINTS) / secondsPerCall;
}

function nativeRate(): number | undefined {
  const source = fileURLToPath(new URL('./native/spectrum-kernel.c', import.meta.url));
  const binary = join(mkdtempSync(join(tmpdir(), 'fringe-bench-')), 'spectrum-kernel');
  try {
    execFileSync('cc', ['-O2', '-fcx-limited-range', '-o', binary, source, '-lm'], { stdio: 'pipe' });
  } catch {
    return undefined;
  }
  const [rate] = execFileSync(binary, { encoding: 'utf8' }).trim().split(/\s+/);
  return Number(rate);
}

export const opticsBenchmarks: Benchmark[] = [
  {
    name: 'optics.spectrum.100x2000',
    run(): BenchResult[] {
      // Alternate the two so that a noisy neighbour hits both alike.
      const ts1 = typescriptRate();
      const c = nativeRate();
      const ts2 = typescriptRate();
      const ts = Math.max(ts1, ts2);
      const results: BenchResult[] = [
        { name: 'optics.spectrum.100x2000', value: ts, unit: 'evaluations/s', note: `${((LAYERS * POINTS) / ts * 1e3).toFixed(2)} ms per spectrum; goal ≥ 2.5e7` },
      ];
      if (c !== undefined) {
        results.push({ name: 'optics.spectrum.100x2000.c', value: c, unit: 'evaluations/s', note: 'plain scalar C, cc -O2' });
        results.push({ name: 'optics.spectrum.100x2000.ratio-c-over-ts', value: c / ts, unit: 'ratio', note: 'goal ≤ 1.5' });
      }
      return results;
    },
  },
];
