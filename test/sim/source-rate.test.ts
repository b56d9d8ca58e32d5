// The true rate of a source: its exact integral against a closed form and against quadrature
// of the rate itself, and the fluctuation's rms and correlation time as configured.
import { describe, expect, it } from 'vitest';
import { createRandomStream, fluctuationGridS, SourceRate, type SourceRateSettings } from '../../sim/index.ts';
import { autocorrelation, meanAndRms } from './support.ts';

const base: SourceRateSettings = {
  plannedRateNmPerS: 0.5,
  rateBiasPercent: 0,
  rampTimeConstantS: 0,
  fluctuationPercent: 0,
  fluctuationCorrelationS: 20,
  driftPercentPerHour: 0,
};

/**
 * ∫_{t0}^{t} R(1 + b)(1 − e^{−(s − t0)/τ})(1 + D s) ds, D per second: with u = s − t0, U = t − t0,
 * ∫(1 + Ds) = U + D(t² − t0²)/2 and ∫e^{−u/τ}(1 + D t0 + D u) du = (1 + D t0)τ(1 − e^{−U/τ})
 * + D τ(τ − e^{−U/τ}(U + τ)) (elementary integrals; derived).
 */
function closedForm(s: SourceRateSettings, t0: number, t: number): number {
  const r = s.plannedRateNmPerS * (1 + s.rateBiasPercent / 100);
  const d = s.driftPercentPerHour / 100 / 3600;
  const u = t - t0;
  const tau = s.rampTimeConstantS;
  const plain = u + (d * (t * t - t0 * t0)) / 2;
  const decayed = tau === 0 ? 0 : (1 + d * t0) * tau * (1 - Math.exp(-u / tau)) + d * tau * (tau - Math.exp(-u / tau) * (u + tau));
  return r * (plain - decayed);
}

describe('SourceRate', () => {
  it('integrates bias, ramp and drift exactly (closed form)', () => {
    const settings = { ...base, rateBiasPercent: 3, rampTimeConstantS: 2.5, driftPercentPerHour: 4 };
    const rate = new SourceRate(settings, createRandomStream(1, 'r'));
    rate.open(100);
    let sum = 0;
    let t = 100;
    // uneven steps, as shutter events and readings make them
    for (const step of [0.01, 0.3, 1e-6, 2, 7.77, 0.1, 300, 1000]) {
      sum += rate.integrate(t, t + step);
      t += step;
      expect(sum).toBeCloseTo(closedForm(settings, 100, t), 11);
      expect(Math.abs(sum - closedForm(settings, 100, t))).toBeLessThan(1e-11 * Math.max(1, sum));
    }
    // and the rate itself: the ramp reaches 1 − 1/e after one time constant (definition)
    const r2 = new SourceRate(settings, createRandomStream(1, 'r'));
    r2.open(0);
    expect(r2.rateAt(2.5)).toBeCloseTo(0.5 * 1.03 * (1 - Math.exp(-1)) * (1 + (0.04 / 3600) * 2.5), 14);
  });

  it('integrates the fluctuating rate as quadrature of rateAt does', () => {
    const settings = { ...base, rampTimeConstantS: 1.5, fluctuationPercent: 5, fluctuationCorrelationS: 3, driftPercentPerHour: 2 };
    const a = new SourceRate(settings, createRandomStream(5, 'r'));
    const b = new SourceRate(settings, createRandomStream(5, 'r'));
    a.open(0.37);
    b.open(0.37);
    const grid = fluctuationGridS(3);
    // composite Simpson on each grid segment (the rate is smooth there), 16 panels (Simpson's rule; error ∝ h⁴)
    let quad = 0;
    let t = 0.37;
    const end = 60.37;
    while (t < end) {
      const next = Math.min(end, (Math.floor(t / grid + 1e-9) + 1) * grid);
      const h = (next - t) / 16;
      let s = b.rateAt(t); // in time order: the rate may not be asked about the past
      for (let i = 1; i < 16; i++) s += (i % 2 === 1 ? 4 : 2) * b.rateAt(t + i * h);
      s += b.rateAt(next);
      quad += (s * h) / 3;
      t = next;
    }
    let exact = 0;
    for (let k = 0; k < 600; k++) exact += a.integrate(0.37 + k * 0.1, 0.37 + (k + 1) * 0.1);
    expect(Math.abs(exact - quad) / exact).toBeLessThan(1e-9);
  });

  it('fluctuates with the configured rms and correlation time', () => {
    // x(t) sampled every 1 s over 2e5 s, τ = 20 s: AR(1) with φ = e^{−1/20}; Bartlett sampling errors as in random.test.ts
    const settings = { ...base, fluctuationPercent: 2, fluctuationCorrelationS: 20 };
    const rate = new SourceRate(settings, createRandomStream(9, 'source/X/rate'));
    const n = 200_000;
    const xs = Array.from({ length: n }, (_, i) => rate.rateAt(i) / 0.5 - 1);
    const phi = Math.exp(-1 / 20);
    const { rms } = meanAndRms(xs);
    const relVar = Math.sqrt((2 * (1 + phi * phi)) / (n * (1 - phi * phi)));
    expect(Math.abs((rms / 0.02) ** 2 - 1)).toBeLessThan(4 * relVar);
    expect(Math.abs(autocorrelation(xs, 1) - phi)).toBeLessThan(4 * Math.sqrt((1 - phi * phi) / n));
    // at a lag of one correlation time the correlation is 1/e
    expect(Math.abs(autocorrelation(xs, 20) - Math.exp(-1))).toBeLessThan(0.03);
  });

  it('gives the same rate at a given time however it is queried', () => {
    const settings = { ...base, fluctuationPercent: 3, fluctuationCorrelationS: 4 };
    const coarse = new SourceRate(settings, createRandomStream(3, 'r'));
    const fine = new SourceRate(settings, createRandomStream(3, 'r'));
    for (let t = 0; t < 50; t += 0.013) fine.rateAt(t);
    expect(fine.rateAt(50)).toBe(coarse.rateAt(50));
    expect(() => fine.rateAt(10)).toThrow(RangeError);
  });
});
