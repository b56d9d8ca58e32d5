// The monitor's noise measured from its own readings: white noise under a moving signal, spikes
// and a step across a gap left out, too few readings refused.
import { describe, expect, it } from 'vitest';
import { readingNoise, READING_NOISE_MIN } from '../../../src/model/estimate/index.ts';

// Seeded normal deviates: mulberry32 (a public-domain 32-bit generator) and Box–Muller
// (G. E. P. Box and M. E. Muller, Ann. Math. Stat. 29, 610 (1958)).
function normals(seed: number): () => number {
  let a = seed >>> 0;
  const uniform = (): number => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  return () => Math.sqrt(-2 * Math.log(1 - uniform())) * Math.cos(2 * Math.PI * uniform());
}

/** A layer's signal at 10 Hz: a swing of 0.3 over 2000 readings (a level layer's pace), plus white noise. */
function layerReadings(count: number, sigma: number, seed: number): number[] {
  const gauss = normals(seed);
  return Array.from({ length: count }, (_, i) => 0.6 + 0.15 * Math.cos((Math.PI * i) / 2000) + sigma * gauss());
}

describe('readingNoise', () => {
  it('finds the rms of white noise under a moving signal to within 15 % (its scatter from 2000 readings is 3 % rms, measured over 200 seeds: 5σ)', () => {
    for (const [sigma, seed] of [[0.001, 1], [0.005, 2], [0.0002, 3]] as const) {
      const ratio = readingNoise(layerReadings(2000, sigma, seed)) / sigma;
      expect(ratio).toBeGreaterThan(0.85);
      expect(ratio).toBeLessThan(1.15);
    }
  });

  it('leaves spikes, a step across a gap and unreadable values out', () => {
    const values = layerReadings(2000, 0.001, 4);
    for (let i = 50; i < 2000; i += 50) values[i] = (values[i] as number) + (i % 100 === 0 ? 0.05 : -0.05);
    for (let i = 1000; i < 2000; i++) values[i] = (values[i] as number) + 0.02;
    values[700] = Number.NaN;
    values[701] = Number.POSITIVE_INFINITY;
    const noise = readingNoise(values);
    expect(noise).toBeGreaterThan(0.0009);
    expect(noise).toBeLessThan(0.0012);
  });

  it('says nothing from too few readings', () => {
    expect(readingNoise(layerReadings(READING_NOISE_MIN + 1, 0.001, 5))).toBeNaN();
    expect(readingNoise([])).toBeNaN();
    expect(readingNoise([Number.NaN, Number.NaN, Number.NaN])).toBeNaN();
    expect(Number.isFinite(readingNoise(layerReadings(READING_NOISE_MIN + 2, 0.001, 5)))).toBe(true);
  });

  it('a noiseless straight signal has no noise', () => {
    expect(readingNoise(Array.from({ length: 500 }, (_, i) => 0.3 + 1e-4 * i))).toBeLessThan(1e-12);
  });
});
