// The simulator's randomness: the generator against published reference output, the
// distributions' moments within their sampling errors, sub-stream independence, and the
// Ornstein–Uhlenbeck process's variance and correlation time at short and long steps.
import { describe, expect, it } from 'vitest';
import { createRandomStream, OrnsteinUhlenbeck, xoshiro128StarStarFromState } from '../../sim/index.ts';
import { autocorrelation, meanAndRms } from './support.ts';

/** Upper p-quantile of χ² with k degrees of freedom, Wilson–Hilferty (E. B. Wilson, M. M. Hilferty, PNAS 17, 684 (1931)). */
function chiSquareQuantile(k: number, z: number): number {
  const a = 2 / (9 * k);
  return k * (1 - a + z * Math.sqrt(a)) ** 3;
}

describe('xoshiro128**', () => {
  it('reproduces the reference implementation', () => {
    // State 1, 2, 3, 4: the first outputs of the authors' C reference (prng.di.unimi.it/xoshiro128starstar.c)
    // as written out here from memory, compiled with cc and run; it agrees with the published data below.
    const g = xoshiro128StarStarFromState([1, 2, 3, 4]);
    expect(Array.from({ length: 8 }, () => g.nextUint32())).toEqual([11520, 0, 5927040, 70819200, 2031721883, 1637235492, 1287239034, 3734860849]);
    // Known-answer data made with the C reference implementation, published with an independent
    // port (github.com/edorfaus/xoshiro-6502, test-rom/testdata.asm: seed and "starstar" column).
    const h = xoshiro128StarStarFromState([0x964d4a0c, 0xd40ab895, 0xad7fdecb, 0x3006f0f0]);
    expect(Array.from({ length: 4 }, () => h.nextUint32())).toEqual([0xf1391922, 0x6fe53806, 0xa5be2840, 0xf510ee70]);
  });
});

describe('createRandomStream', () => {
  it('gives the same stream for the same seed and purpose, different ones otherwise', () => {
    const draw = (seed: number, purpose: string) => {
      const s = createRandomStream(seed, purpose);
      return Array.from({ length: 50 }, () => s.nextUint32());
    };
    expect(draw(7, 'a')).toEqual(draw(7, 'a'));
    expect(draw(7, 'a')).not.toEqual(draw(7, 'b'));
    expect(draw(7, 'a')).not.toEqual(draw(8, 'a'));
    expect(draw(-3, 'a')).toEqual(draw(-3, 'a'));
    expect(() => createRandomStream(1.5, 'a')).toThrow(RangeError);
  });

  it('makes uncorrelated streams for neighbouring seeds and purposes', () => {
    // Pearson correlation of N independent pairs has sd 1/√N (e.g. Kendall & Stuart, from memory): allow 4/√N.
    const n = 50_000;
    const pairs: [string, number, string, number][] = [
      ['optical/noise', 1, 'optical/noise', 2],
      ['source/TiO2/rate', 1, 'source/SiO2/rate', 1],
      ['a', 0, 'b', 0],
    ];
    for (const [pa, sa, pb, sb] of pairs) {
      const x = createRandomStream(sa, pa);
      const y = createRandomStream(sb, pb);
      let sxy = 0;
      for (let i = 0; i < n; i++) sxy += (x.uniform() - 0.5) * (y.uniform() - 0.5);
      const r = sxy / n / (1 / 12);
      expect(Math.abs(r)).toBeLessThan(4 / Math.sqrt(n));
    }
  });
});

describe('distributions', () => {
  const n = 200_000;

  it('uniform on [0, 1): mean, variance and a χ² test of 64 bins', () => {
    const s = createRandomStream(11, 'test/uniform');
    const bins = new Array<number>(64).fill(0);
    const xs: number[] = [];
    let inRange = true;
    for (let i = 0; i < n; i++) {
      const u = s.uniform();
      if (!(u >= 0 && u < 1)) inRange = false;
      xs.push(u);
      bins[Math.floor(u * 64)]! += 1;
    }
    expect(inRange).toBe(true);
    const { mean, rms } = meanAndRms(xs);
    // mean 1/2, sd of the mean √(1/12/N); variance 1/12, sd of the sample variance √((μ₄ − σ⁴)/N), μ₄ = 1/80 (derived)
    expect(Math.abs(mean - 0.5)).toBeLessThan(4 * Math.sqrt(1 / 12 / n));
    expect(Math.abs(rms * rms - 1 / 12)).toBeLessThan(4 * Math.sqrt((1 / 80 - 1 / 144) / n));
    const expected = n / 64;
    const chi2 = bins.reduce((acc, b) => acc + ((b - expected) ** 2) / expected, 0);
    // 63 degrees of freedom, upper 1e-4 point (z = 3.719, standard normal table, from memory)
    expect(chi2).toBeLessThan(chiSquareQuantile(63, 3.719));
  });

  it('Gaussian: mean 0, variance 1, kurtosis 3, 68.27 % within ±1', () => {
    const s = createRandomStream(12, 'test/gauss');
    let m1 = 0;
    let m2 = 0;
    let m4 = 0;
    let inside = 0;
    for (let i = 0; i < n; i++) {
      const x = s.gaussian();
      m1 += x;
      m2 += x * x;
      m4 += x ** 4;
      if (Math.abs(x) < 1) inside++;
    }
    m1 /= n;
    m2 /= n;
    m4 /= n;
    // sds of the moment estimates for N(0,1): √(1/N), √(2/N), √((105 − 9)/N) (E x⁸ = 105; derived)
    expect(Math.abs(m1)).toBeLessThan(4 / Math.sqrt(n));
    expect(Math.abs(m2 - 1)).toBeLessThan(4 * Math.sqrt(2 / n));
    expect(Math.abs(m4 - 3)).toBeLessThan(4 * Math.sqrt(96 / n));
    // P(|x| < 1) = erf(1/√2) = 0.682689 (standard normal table, from memory)
    const p = 0.682689;
    expect(Math.abs(inside / n - p)).toBeLessThan(4 * Math.sqrt((p * (1 - p)) / n));
  });

  it('exponential: mean 1, variance 1', () => {
    const s = createRandomStream(13, 'test/exp');
    const xs = Array.from({ length: n }, () => s.exponential());
    expect(xs.every((x) => x >= 0)).toBe(true);
    const { mean, rms } = meanAndRms(xs);
    // sd of the mean 1/√N; of the sample variance √((μ₄ − 1)/N), μ₄ = 9 (derived)
    expect(Math.abs(mean - 1)).toBeLessThan(4 / Math.sqrt(n));
    expect(Math.abs(rms * rms - 1)).toBeLessThan(4 * Math.sqrt(8 / n));
  });
});

describe('OrnsteinUhlenbeck', () => {
  /**
   * Sampled every Δ, the exact OU is AR(1) with φ = e^{−Δ/τ}, variance σ². Sampling errors
   * (Bartlett's formulas; e.g. Box & Jenkins, Time Series Analysis, from memory):
   * sd(s²)/σ² = √(2(1 + φ²)/(N(1 − φ²))), sd(φ̂) = √((1 − φ²)/N).
   */
  function check(sigma: number, tauS: number, stepS: number, n: number, seed: number): void {
    const ou = new OrnsteinUhlenbeck(createRandomStream(seed, 'test/ou'), sigma, tauS);
    const xs: number[] = [ou.value];
    for (let i = 1; i < n; i++) xs.push(ou.step(stepS));
    const phi = Math.exp(-stepS / tauS);
    const { rms } = meanAndRms(xs);
    const relVar = Math.sqrt((2 * (1 + phi * phi)) / (n * (1 - phi * phi)));
    expect(Math.abs((rms * rms) / (sigma * sigma) - 1)).toBeLessThan(4 * relVar);
    const r1 = autocorrelation(xs, 1);
    expect(Math.abs(r1 - phi)).toBeLessThan(4 * Math.sqrt((1 - phi * phi) / n) + 1 / n);
  }

  it('has the configured rms and correlation time at short steps', () => {
    check(0.02, 20, 1, 200_000, 21);
    // and the correlation time itself: τ̂ = −Δ/ln r̂(1), with a 4σ band from sd(φ̂)·dτ/dφ
    const ou = new OrnsteinUhlenbeck(createRandomStream(22, 'test/ou'), 1, 20);
    const xs = Array.from({ length: 200_000 }, () => ou.step(1));
    const r1 = autocorrelation(xs, 1);
    const tauHat = -1 / Math.log(r1);
    const phi = Math.exp(-1 / 20);
    const sdTau = Math.sqrt((1 - phi * phi) / xs.length) / (phi * Math.log(phi) ** 2);
    expect(Math.abs(tauHat - 20)).toBeLessThan(4 * sdTau);
  });

  it('keeps its statistics at steps longer than τ (exact discretisation)', () => {
    // An Euler step x += −x Δ/τ + σ√(2Δ/τ) ξ would give variance σ²·2/(2 − Δ/τ) and correlation 1 − Δ/τ: wrong for Δ ~ τ.
    check(0.05, 2, 3, 100_000, 23);
    check(0.05, 2, 0.5, 100_000, 24);
  });

  it('starts in the stationary state', () => {
    // x(0) over M independent seeds has rms σ; sd of s²/σ² is √(2/M)
    const m = 20_000;
    const xs = Array.from({ length: m }, (_, i) => new OrnsteinUhlenbeck(createRandomStream(i, 'test/ou0'), 0.03, 5).value);
    const { rms } = meanAndRms(xs);
    expect(Math.abs((rms / 0.03) ** 2 - 1)).toBeLessThan(4 * Math.sqrt(2 / m));
  });

  it('is zero and draws nothing when σ = 0', () => {
    const s = createRandomStream(1, 'x');
    const ou = new OrnsteinUhlenbeck(s, 0, 5);
    for (let i = 0; i < 10; i++) expect(ou.step(1)).toBe(0);
    expect(s.nextUint32()).toBe(createRandomStream(1, 'x').nextUint32());
    expect(() => new OrnsteinUhlenbeck(s, 1, 0)).toThrow(RangeError);
  });
});
