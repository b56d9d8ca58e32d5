// How precisely a layer can be cut: the Cramér–Rao bound of the model fit checked by Monte Carlo
// against a Gauss–Newton fit of simulated readings, the plain rules against the worked example
// of physics-notes.md, and the 4×4 inverse behind the bound.
import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { buildChipMonitor, type ChipMonitor } from '../../../src/model/plan/chip-monitor.ts';
import {
  DEFAULT_PRIORS,
  firstDiagonalOfInverse,
  fitPrecisionBound,
  levelRulePrecision,
  turningPointRulePrecision,
  type FitPriors,
} from '../../../src/model/plan/precision.ts';
import type { Dispersion } from '../../../src/model/optics/dispersion.ts';

const constant = (n: number): Dispersion => ({ model: 'constant', n, k: 0 });

/** TiO2-like n = 2.35 growing on a bare n = 1.52 chip, transmission at 550 nm, single wavelength. */
function titaniaOnGlass(back: 'incoherent' | 'none'): ChipMonitor {
  return buildChipMonitor({
    incident: constant(1),
    substrate: constant(1.52),
    back,
    substrateThicknessNm: 1e6,
    below: [],
    growing: constant(2.35),
    wavelengthNm: 550,
    bandwidthNm: 0,
    angleDeg: 0,
    signal: 'transmission',
  });
}

const QUARTER_WAVE_NM = 550 / (4 * 2.35);
/** dδ/dd = 2πn/λ, rad per nm (phase thickness δ = 2πnd/λ). */
const RAD_PER_NM = (2 * Math.PI * 2.35) / 550;

// ---------------------------------------------------------------------------------------------
// Seeded normal deviates: mulberry32 (a public-domain 32-bit generator) and Box–Muller
// (G. E. P. Box and M. E. Muller, Ann. Math. Stat. 29, 610 (1958)).

function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function normal(uniform: () => number): () => number {
  return () => {
    let u = uniform();
    while (u === 0) u = uniform();
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * uniform());
  };
}

/** Solves the symmetric positive-definite 4×4 system A x = b (row-major) by Cholesky. */
function solveSpd4(a: Float64Array, b: Float64Array): Float64Array {
  const l = new Float64Array(16);
  for (let i = 0; i < 4; i++) {
    for (let j = 0; j <= i; j++) {
      let s = a[i * 4 + j]!;
      for (let k = 0; k < j; k++) s -= l[i * 4 + k]! * l[j * 4 + k]!;
      l[i * 4 + j] = i === j ? Math.sqrt(s) : s / l[j * 4 + j]!;
    }
  }
  const z = new Float64Array(4);
  for (let i = 0; i < 4; i++) {
    let s = b[i]!;
    for (let k = 0; k < i; k++) s -= l[i * 4 + k]! * z[k]!;
    z[i] = s / l[i * 4 + i]!;
  }
  const x = new Float64Array(4);
  for (let i = 3; i >= 0; i--) {
    let s = z[i]!;
    for (let k = i + 1; k < 4; k++) s -= l[k * 4 + i]! * x[k]!;
    x[i] = s / l[i * 4 + i]!;
  }
  return x;
}

interface MonteCarloResult {
  bound: number;
  rms: number;
  mean: number;
}

/**
 * Readings y_i = S(d_i) + ε_i, d_i = d_cut − r·(t_cut − t_i), one every 1/f_s from bare chip to
 * cut (the measurement model of ESTIMATION.md with g = 1, o = 0), fitted for θ = (d_cut, r, g, o)
 * by Gauss–Newton with the priors as pseudo-observations. The prior means are drawn about the
 * truth with the priors' widths, as the bound (prior information added to the Fisher
 * information) assumes.
 */
function monteCarlo(monitor: ChipMonitor, cutNm: number, readings: number, trials: number, seed: number): MonteCarloResult {
  const sampleRateHz = 10;
  const sigma = 0.001;
  const priors = DEFAULT_PRIORS;
  const tCut = (readings - 1) / sampleRateHz;
  const rate = cutNm / tCut;
  // The plan's bound, from a fine curve of the same layer.
  const steps = 3000;
  const step = cutNm / steps;
  const curve = Float64Array.from({ length: steps + 1 }, (_, i) => monitor.signalAt(i * step));
  const bound = fitPrecisionBound(curve, steps + 1, step, rate, sampleRateHz, sigma, priors);

  const gauss = normal(mulberry32(seed));
  const before = Float64Array.from({ length: readings }, (_, i) => tCut - i / sampleRateHz);
  const clean = Float64Array.from(before, (tau) => monitor.signalAt(cutNm - rate * tau));
  const sr = priors.rateSigmaFraction * rate;
  const sg = priors.gainSigma;
  const so = priors.offsetSigma;
  const y = new Float64Array(readings);
  const a = new Float64Array(16);
  const b = new Float64Array(4);
  const grad = new Float64Array(4);
  const h = 1e-4;
  let sum = 0;
  let sumSq = 0;
  for (let trial = 0; trial < trials; trial++) {
    for (let i = 0; i < readings; i++) y[i] = clean[i]! + sigma * gauss();
    const rPrior = rate + sr * gauss();
    const gPrior = 1 + sg * gauss();
    const oPrior = so * gauss();
    // Start where the plan and the calibration put it: the planned cut, the prior means.
    let d = cutNm;
    let r = rPrior;
    let g = gPrior;
    let o = oPrior;
    for (let iteration = 0; iteration < 30; iteration++) {
      a.fill(0);
      b.fill(0);
      for (let i = 0; i < readings; i++) {
        const di = d - r * before[i]!;
        const s = monitor.signalAt(di);
        const slope = (monitor.signalAt(di + h) - monitor.signalAt(di - h)) / (2 * h);
        grad[0] = g * slope;
        grad[1] = -g * slope * before[i]!;
        grad[2] = s;
        grad[3] = 1;
        const residual = y[i]! - (g * s + o);
        for (let p = 0; p < 4; p++) {
          b[p] = b[p]! + grad[p]! * residual;
          for (let q = 0; q < 4; q++) a[p * 4 + q] = a[p * 4 + q]! + grad[p]! * grad[q]!;
        }
      }
      for (let k = 0; k < 16; k++) a[k] = a[k]! / (sigma * sigma);
      for (let k = 0; k < 4; k++) b[k] = b[k]! / (sigma * sigma);
      a[5] = a[5]! + 1 / (sr * sr);
      b[1] = b[1]! + (rPrior - r) / (sr * sr);
      a[10] = a[10]! + 1 / (sg * sg);
      b[2] = b[2]! + (gPrior - g) / (sg * sg);
      a[15] = a[15]! + 1 / (so * so);
      b[3] = b[3]! + (oPrior - o) / (so * so);
      const dx = solveSpd4(a, b);
      d += dx[0]!;
      r += dx[1]!;
      g += dx[2]!;
      o += dx[3]!;
      if (Math.abs(dx[0]!) < 1e-9 * cutNm) break;
    }
    sum += d - cutNm;
    sumSq += (d - cutNm) ** 2;
  }
  return { bound, rms: Math.sqrt(sumSq / trials), mean: sum / trials };
}

describe('fitPrecisionBound against Monte Carlo fits', () => {
  // 300 trials: the rms of 300 independent Gaussian errors has a relative standard error of
  // 1/√(2·300) = 4.1 %, so ±15 % is 3.7 standard errors; the fit's linearisation error at
  // σ = 0.001 is far smaller (errors ≈ 0.1–0.2 % of the thickness).
  const trials = 300;
  const monitor = titaniaOnGlass('incoherent');

  it('a level-cut layer (cut at half a quarter-wave, δ = π/4): the rms error of d_cut is the bound within 15 %', () => {
    const r = monteCarlo(monitor, QUARTER_WAVE_NM / 2, 600, trials, 20240601);
    expect(r.bound).toBeGreaterThan(0);
    expect(Math.abs(r.rms / r.bound - 1)).toBeLessThan(0.15);
    // No bias beyond sampling: |mean| under 4 standard errors of the mean.
    expect(Math.abs(r.mean)).toBeLessThan((4 * r.rms) / Math.sqrt(trials));
  });

  it('a turning-point layer (cut at the quarter-wave): the rms error of d_cut is the bound within 15 %', () => {
    const r = monteCarlo(monitor, QUARTER_WAVE_NM, 600, trials, 7);
    expect(r.bound).toBeGreaterThan(0);
    expect(Math.abs(r.rms / r.bound - 1)).toBeLessThan(0.15);
    expect(Math.abs(r.mean)).toBeLessThan((4 * r.rms) / Math.sqrt(trials));
  });
});

describe('fitPrecisionBound scaling', () => {
  const monitor = titaniaOnGlass('incoherent');
  const steps = 600;
  const cut = 0.8 * QUARTER_WAVE_NM;
  const step = cut / steps;
  const curve = Float64Array.from({ length: steps + 1 }, (_, i) => monitor.signalAt(i * step));
  const none: FitPriors = { gainSigma: Number.POSITIVE_INFINITY, offsetSigma: Number.POSITIVE_INFINITY, rateSigmaFraction: Number.POSITIVE_INFINITY };
  const bound = (noise: number, priors: FitPriors, sampleRateHz = 10): number =>
    fitPrecisionBound(curve, steps + 1, step, 0.3, sampleRateHz, noise, priors);

  it('without prior information the bound is proportional to the noise and to 1/√(sample rate)', () => {
    // J = Σ vvᵀ/σ², so J⁻¹ ∝ σ² and ∝ 1/(readings per nm) (Kay, Estimation Theory, ch. 3).
    const base = bound(0.001, none);
    expect(Number.isFinite(base)).toBe(true);
    expect(Math.abs(bound(0.002, none) / base - 2)).toBeLessThan(1e-9);
    expect(Math.abs(bound(0.001, none, 40) / base - 0.5)).toBeLessThan(1e-9);
  });

  it('with the default priors, doubling the noise raises the bound by more than 1× and at most 2×', () => {
    // J(2σ) = J_data/4σ² + P ≥ J(σ)/4, so the bound at most doubles; the priors help more at 2σ.
    const ratio = bound(0.002, DEFAULT_PRIORS) / bound(0.001, DEFAULT_PRIORS);
    expect(ratio).toBeGreaterThan(1);
    expect(ratio).toBeLessThanOrEqual(2 + 1e-12);
    // Priors only add information: the bound with them is below the bound without.
    expect(bound(0.001, DEFAULT_PRIORS)).toBeLessThan(bound(0.001, none));
  });

  it('fewer than three samples give no bound', () => {
    expect(fitPrecisionBound(curve, 2, step, 0.3, 10, 0.001, DEFAULT_PRIORS)).toBe(Number.POSITIVE_INFINITY);
  });
});

describe('the plain rules against the worked example of physics-notes.md', () => {
  // physics-notes.md, "Noise-to-thickness error" (derived there): TiO2 n = 2.35 on glass 1.52,
  // transmission at 550 nm, back face ignored: T(0) = 0.9574, T(QW) = 0.676995, T″ at the QW =
  // 0.39658 per rad²; σ = 0.001: threshold k = 1 → 0.0710 rad (4.5 % of a QW); level cut at
  // δ = π/4 (dT/dδ = −0.272) → 3.7e-3 rad.
  const monitor = titaniaOnGlass('none');

  it('reproduces the example curve: T(0), T(QW) and T″ at the QW', () => {
    expect(Math.abs(monitor.signalAt(0) - 0.9574)).toBeLessThan(5e-5);
    expect(Math.abs(monitor.signalAt(QUARTER_WAVE_NM) - 0.676995)).toBeLessThan(5e-7);
    const h = 0.2;
    const curvaturePerNm2 = (monitor.signalAt(QUARTER_WAVE_NM + h) - 2 * monitor.signalAt(QUARTER_WAVE_NM) + monitor.signalAt(QUARTER_WAVE_NM - h)) / (h * h);
    expect(Math.abs(curvaturePerNm2 / RAD_PER_NM ** 2 - 0.39658)).toBeLessThan(5e-6);
  });

  it('turningPointRulePrecision: 0.0710 rad, 4.5 % of a quarter-wave', () => {
    const h = 0.2;
    const curvaturePerNm2 = (monitor.signalAt(QUARTER_WAVE_NM + h) - 2 * monitor.signalAt(QUARTER_WAVE_NM) + monitor.signalAt(QUARTER_WAVE_NM - h)) / (h * h);
    const rad = turningPointRulePrecision(0.001, curvaturePerNm2) * RAD_PER_NM;
    expect(Math.abs(rad - 0.071)).toBeLessThan(5e-5);
    expect(Math.abs(rad / (Math.PI / 2) - 0.045)).toBeLessThan(5e-4);
    // The sign of the curvature does not matter (a maximum turns like a minimum); k enters as √k.
    expect(turningPointRulePrecision(0.001, -curvaturePerNm2)).toBe(turningPointRulePrecision(0.001, curvaturePerNm2));
    expect(turningPointRulePrecision(0.001, curvaturePerNm2, 4) / turningPointRulePrecision(0.001, curvaturePerNm2)).toBeCloseTo(2, 12);
  });

  it('levelRulePrecision at δ = π/4: slope −0.272 per rad, 3.7e-3 rad', () => {
    const d = QUARTER_WAVE_NM / 2;
    const h = 1e-3;
    const slopePerNm = (monitor.signalAt(d + h) - monitor.signalAt(d - h)) / (2 * h);
    expect(Math.abs(slopePerNm / RAD_PER_NM - -0.272)).toBeLessThan(5e-4);
    const rad = levelRulePrecision(0.001, slopePerNm) * RAD_PER_NM;
    expect(Math.abs(rad - 3.7e-3)).toBeLessThan(5e-5);
  });
});

describe('firstDiagonalOfInverse', () => {
  /** (A⁻¹)₁₁ by Gauss–Jordan elimination with partial pivoting on [A | e₁]. */
  function directFirstDiagonal(a: readonly number[]): number {
    const m = Array.from({ length: 4 }, (_, i) => [...a.slice(i * 4, i * 4 + 4), i === 0 ? 1 : 0]);
    for (let k = 0; k < 4; k++) {
      let p = k;
      for (let i = k + 1; i < 4; i++) if (Math.abs(m[i]![k]!) > Math.abs(m[p]![k]!)) p = i;
      [m[k], m[p]] = [m[p]!, m[k]!];
      for (let i = 0; i < 4; i++) {
        if (i === k) continue;
        const f = m[i]![k]! / m[k]![k]!;
        for (let j = k; j < 5; j++) m[i]![j] = m[i]![j]! - f * m[k]![j]!;
      }
    }
    return m[0]![4]! / m[0]![0]!;
  }

  it('matches a direct inverse on random symmetric positive-definite matrices', () => {
    const entry = fc.double({ min: -1, max: 1, noNaN: true });
    fc.assert(
      fc.property(fc.array(entry, { minLength: 16, maxLength: 16 }), fc.double({ min: 0.05, max: 2, noNaN: true }), fc.integer({ min: -6, max: 6 }), (bEntries, ridge, exponent) => {
        // A = s·(BᵀB + ridge·I): symmetric, positive definite, condition number below ~1e3.
        const scale = 10 ** exponent;
        const a: number[] = [];
        for (let i = 0; i < 4; i++) {
          for (let j = 0; j < 4; j++) {
            let s = i === j ? ridge : 0;
            for (let k = 0; k < 4; k++) s += bEntries[k * 4 + i]! * bEntries[k * 4 + j]!;
            a.push(scale * s);
          }
        }
        const got = firstDiagonalOfInverse(Float64Array.from(a));
        const expected = directFirstDiagonal(a);
        expect(expected).toBeGreaterThan(0);
        expect(Math.abs(got - expected)).toBeLessThanOrEqual(1e-9 * expected);
      }),
      { numRuns: 300 },
    );
  });

  it('gives the inverse of a diagonal matrix exactly', () => {
    expect(firstDiagonalOfInverse(Float64Array.of(4, 0, 0, 0, 0, 2, 0, 0, 0, 0, 3, 0, 0, 0, 0, 5))).toBe(0.25);
  });

  it('is NaN for singular matrices', () => {
    // Rank one: v vᵀ with v = (1, 2, 3, 4); the lower-right block is already singular.
    const v = [1, 2, 3, 4];
    expect(firstDiagonalOfInverse(Float64Array.from({ length: 16 }, (_, k) => v[Math.floor(k / 4)]! * v[k % 4]!))).toBeNaN();
    // Two parameters that cannot be told apart (rows 1 and 2 equal): the Schur complement is 0.
    expect(firstDiagonalOfInverse(Float64Array.of(1, 1, 0, 0, 1, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1))).toBeNaN();
    // Not positive definite.
    expect(firstDiagonalOfInverse(Float64Array.of(1, 0, 0, 0, 0, -1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1))).toBeNaN();
  });
});
