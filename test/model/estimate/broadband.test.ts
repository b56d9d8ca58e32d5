// The broadband estimator and plan: the chip's spectra against the reference cases, its slopes,
// exact recovery from noise-free spectra, the Monte Carlo error at the cut against the plan's
// bound, a thin non-quarter-wave layer, the merit and its alert, the chip below's bias, bad input.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { createRandomStream, type RandomStream } from '../../../sim/random.ts';
import { buildBroadbandChip, type BroadbandChip, type BroadbandChipSpec } from '../../../src/model/estimate/broadband-chip.ts';
import { createBroadbandFit, departureThreshold, type BroadbandFitOptions } from '../../../src/model/estimate/broadband-fit.ts';
import type { Dispersion } from '../../../src/model/optics/dispersion.ts';
import { planBroadbandLayer, type BroadbandPlanInput } from '../../../src/model/plan/broadband-plan.ts';
import { loadTmmCases, type ReferenceCase } from '../../support/reference.ts';

const constant = (n: number, k = 0): Dispersion => ({ model: 'constant', n, k });
// Invented film materials with a little dispersion (Cauchy A + B/λ², λ in µm; not a real film's data).
const HIGH: Dispersion = { model: 'cauchy', n: [2.2, 0.02], k: [] };
const LOW: Dispersion = { model: 'cauchy', n: [1.45, 0.004], k: [] };
const GRID = Float64Array.from({ length: 251 }, (_, i) => 400 + 2 * i); // the 400–900 nm in 2 nm steps
const NOISE = 0.002; // the 0.2 % per wavelength
const RATE_HZ = 5; // the 5 spectra/s
const DELAY_S = 0.2;
const PRIORS = { rateSigmaFraction: 0.05, indexSigma: 0.03, gainSigma: 0.01, offsetSigma: 0.005 } as const;

// ---------------------------------------------------------------------------------------------
// Reference cases: the growing layer is the one the light meets first (the reference's layers[0]).

const REFERENCE_TOLERANCE = 1e-9; // the kernel's bound against the same set (reference-cases.test.ts)

function chipOf(c: ReferenceCase, signal: 'transmission' | 'reflection', growingScale = 1): BroadbandChipSpec {
  const [top, ...rest] = c.layers;
  const incoherent = c.substrateTreatment === 'incoherent-thick';
  return {
    incident: constant(c.incidentIndex),
    substrate: constant(c.substrate.n, c.substrate.k),
    back: incoherent ? 'incoherent' : 'none',
    substrateThicknessNm: c.substrateThicknessNm ?? 0,
    below: rest.map((l) => ({ dispersion: constant(l.n, l.k), thicknessNm: l.thicknessNm })).reverse(),
    growing: constant((top as { n: number }).n / growingScale, (top as { k: number }).k),
    angleDeg: c.angleDeg,
    signal,
    polarisation: c.polarization,
  };
}

function valueAt(chip: BroadbandChip, uNm: number, kappa: number): number {
  const out = new Float64Array(1);
  chip.spectrum(out, uNm, kappa);
  return out[0] as number;
}

const cases = loadTmmCases();

describe('the chip spectrum against the reference cases (tmm 0.2.0, shared/reference/tmm-cases.json)', () => {
  const withLayers = cases.filter((c) => c.layers.length > 0 && c.family !== 'monitoring-curve' && c.exitIndex === undefined);
  it('covers the layered cases', () => {
    expect(withLayers.length).toBeGreaterThan(40);
  });
  for (const c of withLayers) {
    it(`${c.id} ${c.family}: T and R of the growing top layer agree to ${REFERENCE_TOLERANCE}, at κ = 1 and through κ = 1.07`, () => {
      const e = c.expected as Record<string, number>;
      const top = c.layers[0] as { thicknessNm: number };
      for (const [signal, want] of [['transmission', e.T], ['reflection', e.R]] as const) {
        const plain = buildBroadbandChip(chipOf(c, signal), [c.wavelengthNm]);
        expect(Math.abs(valueAt(plain, top.thicknessNm, 1) - (want as number))).toBeLessThan(REFERENCE_TOLERANCE);
        // The same film as a design index 1.07 too low, κ = 1.07: u = κ·d.
        const scaled = buildBroadbandChip(chipOf(c, signal, 1.07), [c.wavelengthNm]);
        expect(Math.abs(valueAt(scaled, 1.07 * top.thicknessNm, 1.07) - (want as number))).toBeLessThan(REFERENCE_TOLERANCE);
      }
    });
  }
  for (const c of cases.filter((x) => x.family === 'monitoring-curve' && x.sweepLayerIndex === 0)) {
    it(`${c.id}: the growing layer's curve agrees point by point to ${REFERENCE_TOLERANCE}`, () => {
      const e = c.expected as { thicknessNm: number[]; T: number[]; R: number[] };
      const t = buildBroadbandChip(chipOf(c, 'transmission'), [c.wavelengthNm]);
      const r = buildBroadbandChip(chipOf(c, 'reflection'), [c.wavelengthNm]);
      for (let i = 0; i < e.thicknessNm.length; i++) {
        expect(Math.abs(valueAt(t, e.thicknessNm[i] as number, 1) - (e.T[i] as number))).toBeLessThan(REFERENCE_TOLERANCE);
        expect(Math.abs(valueAt(r, e.thicknessNm[i] as number, 1) - (e.R[i] as number))).toBeLessThan(REFERENCE_TOLERANCE);
      }
    });
  }
});

// ---------------------------------------------------------------------------------------------
// Chips of our own.

/** Three finished layers on glass, a low-index layer growing (a few-layer chip). */
const FEW_LAYER: BroadbandChipSpec = {
  incident: constant(1),
  substrate: constant(1.52),
  back: 'incoherent',
  substrateThicknessNm: 1e6,
  below: [
    { dispersion: HIGH, thicknessNm: 60 },
    { dispersion: LOW, thicknessNm: 95 },
    { dispersion: HIGH, thicknessNm: 55 },
  ],
  growing: LOW,
  angleDeg: 0,
  signal: 'transmission',
};

/**
 * A non-quarter-wave design of our own (invented for this test): glass | H 31 | L 47 | H 118 | L 22 | H 13 nm.
 * The last layer, 13 nm of H, is the thin one.
 */
const THIN_LAYER: BroadbandChipSpec = {
  ...FEW_LAYER,
  below: [
    { dispersion: HIGH, thicknessNm: 31 },
    { dispersion: LOW, thicknessNm: 47 },
    { dispersion: HIGH, thicknessNm: 118 },
    { dispersion: LOW, thicknessNm: 22 },
  ],
  growing: HIGH,
};

describe('the chip spectrum', () => {
  it('its slopes agree with central differences of the spectrum (to 1e-4 of the largest)', () => {
    const chip = buildBroadbandChip({ ...FEW_LAYER, angleDeg: 25, growing: { model: 'cauchy', n: [2.1, 0.02], k: [0.002] } }, GRID);
    const S = new Float64Array(GRID.length);
    const dU = new Float64Array(GRID.length);
    const dK = new Float64Array(GRID.length);
    chip.spectrumAndSlopes(S, dU, dK, 70, 1.02);
    const plus = new Float64Array(GRID.length);
    const minus = new Float64Array(GRID.length);
    const h = 1e-3;
    chip.spectrum(plus, 70 + h, 1.02);
    chip.spectrum(minus, 70 - h, 1.02);
    const largestU = Math.max(...Array.from(dU, Math.abs));
    for (let w = 0; w < GRID.length; w++) expect(Math.abs((dU[w] as number) - ((plus[w] as number) - (minus[w] as number)) / (2 * h))).toBeLessThan(1e-4 * largestU);
    chip.spectrum(plus, 70, 1.02 + 1e-4);
    chip.spectrum(minus, 70, 1.02 - 1e-4);
    const largestK = Math.max(...Array.from(dK, Math.abs));
    for (let w = 0; w < GRID.length; w++) expect(Math.abs((dK[w] as number) - ((plus[w] as number) - (minus[w] as number)) / 2e-4)).toBeLessThan(1e-4 * largestK);
  });

  it('outside the valid range there is no model: NaN, and a grid wholly outside is refused in one sentence', () => {
    const chip = buildBroadbandChip({ ...FEW_LAYER, validRangeNm: [450, 850] }, GRID);
    const out = new Float64Array(GRID.length);
    chip.spectrum(out, 40, 1);
    expect(Number.isNaN(out[0])).toBe(true);
    expect(Number.isFinite(out[25])).toBe(true); // 450 nm
    expect(chip.modelled.length).toBe(201);
    expect(() => buildBroadbandChip({ ...FEW_LAYER, validRangeNm: [1000, 1100] }, GRID)).toThrow(/no wavelength of the grid lies in the valid range/);
  });
});

// ---------------------------------------------------------------------------------------------
// A simulated layer: spectra of the truth with noise, gain and offset drifting, fed to the filter.

interface Truth {
  rate: number;
  kappa: number;
  gain: number;
  offset: number;
}

interface LayerRun {
  /** u estimated for the close, and the truth then; the instant the cut went out. */
  estimatedNm: number;
  trueNm: number;
  cutS: number;
  sigmaNm: number;
  kappa: number;
  kappaSigma: number;
}

function runLayer(
  chip: BroadbandChip,
  options: BroadbandFitOptions,
  truth: Truth,
  random: RandomStream | null,
  drift: { gain: number; offset: number; rate: number },
): LayerRun {
  const fit = createBroadbandFit(options);
  const nW = GRID.length;
  const clean = new Float64Array(nW);
  const y = new Float64Array(nW);
  let { gain, offset, rate } = truth;
  let u = 0;
  const dt = 1 / RATE_HZ;
  for (let j = 1; j < 100000; j++) {
    const t = j * dt;
    u += rate * dt;
    if (random) {
      gain += drift.gain * Math.sqrt(dt) * random.gaussian();
      offset += drift.offset * Math.sqrt(dt) * random.gaussian();
      rate += drift.rate * Math.sqrt(dt) * random.gaussian();
    }
    chip.spectrum(clean, u, truth.kappa);
    for (let w = 0; w < nW; w++) y[w] = gain * (clean[w] as number) + offset + (random ? NOISE * random.gaussian() : 0);
    fit.read(y, t);
    if (t + 0.5 * dt >= fit.cutTimeS(options.targetNm, DELAY_S)) {
      const e = fit.estimate(t + DELAY_S);
      return { estimatedNm: e.thicknessNm, trueNm: u + rate * DELAY_S, cutS: t, sigmaNm: e.sigmaNm, kappa: e.indexFactor, kappaSigma: e.indexSigma };
    }
  }
  throw new Error('the layer was never cut');
}

const rms = (xs: readonly number[]): number => Math.sqrt(xs.reduce((s, x) => s + x * x, 0) / xs.length);

describe('the broadband fit', () => {
  const chip = buildBroadbandChip(FEW_LAYER, GRID);

  /** The fit after the ten spectra before the layer reaches uNm, noise-free. */
  function noiseFree(uNm: number, kappa: number, gain: number, offset: number, indexSigma: number): { u: number; sigma: number; gain: number; chi2: number } {
    const clean = new Float64Array(GRID.length);
    const y = new Float64Array(GRID.length);
    const rate = 0.5;
    const fit = createBroadbandFit({ chip, noise: NOISE, targetNm: uNm, rateNmPerS: rate, ...PRIORS, gainSigma: 0.03, offsetSigma: 0.01, indexSigma, indexFactor: indexSigma > 0 ? 1 : kappa });
    for (let j = 9; j >= 0; j--) {
      const u = uNm - j * 0.1;
      chip.spectrum(clean, u, kappa);
      for (let w = 0; w < GRID.length; w++) y[w] = gain * (clean[w] as number) + offset;
      fit.read(y, u / rate);
    }
    const e = fit.estimate(uNm / rate);
    return { u: e.thicknessNm, sigma: e.sigmaNm, gain: e.gain, chi2: fit.merit?.reducedChiSquare ?? Number.NaN };
  }

  it('recovers the truth from noise-free spectra for any thickness 20–150 nm, index, gain and offset in range (property)', () => {
    fc.assert(
      fc.property(
        fc.double({ min: 20, max: 150, noNaN: true }),
        fc.double({ min: 0.96, max: 1.04, noNaN: true }),
        fc.double({ min: 0.97, max: 1.03, noNaN: true }),
        fc.double({ min: -0.01, max: 0.01, noNaN: true }),
        (uNm, kappa, gain, offset) => {
          const got = noiseFree(uNm, kappa, gain, offset, 0.05);
          // The priors pull the MAP estimate by (prior information / data information) of their
          // distance from the truth: a fraction of the fit's own σ (0.1σ at 20 nm and κ 0.8 prior σ
          // off, where ten spectra barely tell u from κ), or at most 2e-3 nm.
          expect(Math.abs(got.u - uNm)).toBeLessThan(Math.max(2e-3, 0.25 * got.sigma));
          expect(Math.abs(got.gain - gain)).toBeLessThan(1e-3);
          expect(got.chi2).toBeLessThan(1e-3);
        },
      ),
      { numRuns: 25, seed: 15 },
    );
  });

  it('recovers a thin layer (1–20 nm) exactly from noise-free spectra when its index is known (property)', () => {
    // Below ~20 nm ten spectra barely tell u from κ (the layer changes the spectrum by ≈ (n² − 1)·d
    // to first order): the index must come from the material's earlier layers.
    fc.assert(
      fc.property(
        fc.double({ min: 1, max: 20, noNaN: true }),
        fc.double({ min: 0.96, max: 1.04, noNaN: true }),
        fc.double({ min: 0.97, max: 1.03, noNaN: true }),
        fc.double({ min: -0.01, max: 0.01, noNaN: true }),
        (uNm, kappa, gain, offset) => {
          const got = noiseFree(uNm, kappa, gain, offset, 0);
          expect(Math.abs(got.u - uNm)).toBeLessThan(2e-3);
          expect(got.chi2).toBeLessThan(1e-3);
        },
      ),
      { numRuns: 25, seed: 16 },
    );
  });

  it('Monte Carlo (0.2 % noise, drifting gain, offset and rate): rms error of the thickness at the close is 0.8–1.25× the plan’s bound', () => {
    const target = 40;
    const rate = 0.5;
    const input: BroadbandPlanInput = { chip: FEW_LAYER, wavelengthsNm: GRID, targetNm: target, rateNmPerS: rate, sampleRateHz: RATE_HZ, shutterDelayS: DELAY_S, noise: NOISE, ...PRIORS };
    const plan = planBroadbandLayer(input);
    const options: BroadbandFitOptions = { chip, use: plan.window.use, noise: NOISE, targetNm: target, rateNmPerS: rate, ...PRIORS };
    const estimation: number[] = [];
    const achieved: number[] = [];
    const runs = 120;
    for (let run = 0; run < runs; run++) {
      const random = createRandomStream(1500 + run, 'broadband-monte-carlo');
      // The truth drawn from the priors the filter states, drifting at the rates it allows (DEFAULT_WANDER).
      const truth: Truth = {
        rate: rate * (1 + PRIORS.rateSigmaFraction * random.gaussian()),
        kappa: 1 + PRIORS.indexSigma * random.gaussian(),
        gain: 1 + PRIORS.gainSigma * random.gaussian(),
        offset: PRIORS.offsetSigma * random.gaussian(),
      };
      const r = runLayer(chip, options, truth, random, { gain: 0.002, offset: 0.001, rate: 0.003 * rate });
      estimation.push(r.estimatedNm - r.trueNm);
      achieved.push(r.trueNm - target);
    }
    const ratio = rms(estimation) / plan.boundNm;
    const cutRatio = rms(achieved) / Math.hypot(plan.boundNm, plan.timingNm);
    console.log(`broadband Monte Carlo: ${runs} runs, bound ${plan.boundNm.toFixed(4)} nm, rms ${rms(estimation).toFixed(4)} nm (×${ratio.toFixed(3)}); as cut ${rms(achieved).toFixed(4)} nm against ${Math.hypot(plan.boundNm, plan.timingNm).toFixed(4)} (×${cutRatio.toFixed(3)})`);
    expect(ratio).toBeGreaterThan(0.8);
    expect(ratio).toBeLessThan(1.25);
    expect(cutRatio).toBeGreaterThan(0.8);
    expect(cutRatio).toBeLessThan(1.25);
  }, 120_000);

  it('a thin layer (13 nm) of a non-quarter-wave design of our own, no use to a single wavelength: rms n·d error ≤ 0.3 %', () => {
    const target = 13;
    const rate = 0.25;
    const thin = buildBroadbandChip(THIN_LAYER, GRID);
    // A single wavelength anywhere in 400–900 nm: the layer does not end on a turning point (the
    // curve still moves at the target), and a level crossing read from one reading is uncertain
    // by σ/|dS/dd| (precision.ts, levelRulePrecision).
    const before = new Float64Array(GRID.length);
    const after = new Float64Array(GRID.length);
    thin.spectrum(before, target * 0.99, 1);
    thin.spectrum(after, target * 1.01, 1);
    let bestLevelNm = Number.POSITIVE_INFINITY;
    for (let w = 0; w < GRID.length; w++) bestLevelNm = Math.min(bestLevelNm, NOISE / Math.abs(((after[w] as number) - (before[w] as number)) / (0.02 * target)));
    expect(bestLevelNm / target).toBeGreaterThan(0.01); // the best wavelength's level rule: over 1 %, three times the goal

    // The index as the material's earlier layer (the 118 nm H below) left it: that layer fitted
    // first on its own chip with the design's prior, then carried with 0.2 % run-to-run wander
    // (INDEX_RUN_SIGMA, stack-precision.ts).
    const earlierSpec: BroadbandChipSpec = { ...THIN_LAYER, below: THIN_LAYER.below.slice(0, 2) };
    const earlier = buildBroadbandChip(earlierSpec, GRID);
    const thinPlan = planBroadbandLayer({ chip: THIN_LAYER, wavelengthsNm: GRID, targetNm: target, rateNmPerS: rate, sampleRateHz: RATE_HZ, shutterDelayS: DELAY_S, noise: NOISE, ...PRIORS, indexSigma: 0.0035 });
    const errors: number[] = [];
    const runs = 40;
    for (let run = 0; run < runs; run++) {
      const random = createRandomStream(2600 + run, 'broadband-thin-layer');
      const kappa = 1 + PRIORS.indexSigma * random.gaussian();
      const drift = { gain: 0.002, offset: 0.001, rate: 0 };
      const first = runLayer(earlier, { chip: earlier, noise: NOISE, targetNm: 118, rateNmPerS: 1, ...PRIORS }, { rate: 1, kappa, gain: 1 + 0.01 * random.gaussian(), offset: 0.005 * random.gaussian() }, random, drift);
      const indexSigma = Math.hypot(first.kappaSigma, 0.002);
      const truth: Truth = { rate: rate * (1 + 0.05 * random.gaussian()), kappa: kappa * (1 + 0.002 * random.gaussian()), gain: 1 + 0.01 * random.gaussian(), offset: 0.005 * random.gaussian() };
      const r = runLayer(thin, { chip: thin, use: thinPlan.window.use, noise: NOISE, targetNm: target, rateNmPerS: rate, ...PRIORS, indexFactor: first.kappa, indexSigma }, truth, random, { ...drift, rate: 0.003 * rate });
      // n·d relative error: u is the thickness at the design index with the layer's optical thickness.
      errors.push((r.estimatedNm - r.trueNm) / r.trueNm);
    }
    console.log(`thin layer: ${runs} runs, rms n·d error ${(100 * rms(errors)).toFixed(3)} %, plan's bound ${((100 * thinPlan.boundNm) / target).toFixed(3)} %, level rule at the best wavelength ${((100 * bestLevelNm) / target).toFixed(2)} %`);
    expect(rms(errors)).toBeLessThan(0.003);
  }, 120_000);

});

describe('the merit: how far a spectrum departs from the model', () => {
  const chip = buildBroadbandChip(FEW_LAYER, GRID);
  const rate = 0.5;
  const options: BroadbandFitOptions = { chip, noise: NOISE, targetNm: 60, rateNmPerS: rate, ...PRIORS };

  /** Feeds `count` spectra of `truthChip` (with noise `noise`) to a fit of `options`, returns every merit. */
  function merits(truthChip: BroadbandChip, noise: number, count: number, seed: number): { reduced: number[]; departs: number; alerts: number[]; sigma: number } {
    const fit = createBroadbandFit(options);
    const random = createRandomStream(seed, 'broadband-merit');
    const clean = new Float64Array(GRID.length);
    const y = new Float64Array(GRID.length);
    const reduced: number[] = [];
    const alerts: number[] = [];
    let departs = 0;
    for (let j = 1; j <= count; j++) {
      truthChip.spectrum(clean, (rate * j) / RATE_HZ, 1);
      for (let w = 0; w < GRID.length; w++) y[w] = (clean[w] as number) + noise * random.gaussian();
      const m = fit.read(y, j / RATE_HZ);
      if (!m) throw new Error('a spectrum was refused');
      reduced.push(m.reducedChiSquare);
      if (m.departs) departs++;
      if (m.alertDue) alerts.push(j);
    }
    return { reduced, departs, alerts, sigma: fit.estimate(count / RATE_HZ).sigmaNm };
  }

  it('the threshold is the Wilson–Hilferty quantile: 247 degrees of freedom at 5σ ≈ 1.517', () => {
    // derived: ((1 − 2/(9·247)) + 5·√(2/(9·247)))³ = 1.5172
    expect(departureThreshold(247, 5)).toBeCloseTo(1.5172, 4);
    // At z = 0 it is the median of χ²/ν, just under 1 (Wilson and Hilferty 1931).
    expect(departureThreshold(247, 0)).toBeGreaterThan(0.99);
    expect(departureThreshold(247, 0)).toBeLessThan(1);
  });

  it('honest spectra: the reduced χ² averages 1 and 500 spectra raise no departure', () => {
    const { reduced, departs, alerts } = merits(chip, NOISE, 500, 1);
    const mean = reduced.reduce((a, b) => a + b, 0) / reduced.length;
    // The mean of 500 values of χ²/ν, sd √(2/247)/√500 ≈ 0.004 (derived): within ±0.03.
    expect(Math.abs(mean - 1)).toBeLessThan(0.03);
    expect(departs).toBe(0);
    expect(alerts).toEqual([]);
  });

  it('a chip below 5 nm off departs on most spectra, and its alert falls due within the first ten', () => {
    // (Smaller errors of the layer just below are largely taken up by κ, gain and u — the plan's
    // belowNm counts what that costs the cut; the merit sees what they cannot take up.)
    const wrong = buildBroadbandChip({ ...FEW_LAYER, below: FEW_LAYER.below.map((l, i) => (i === 2 ? { ...l, thicknessNm: l.thicknessNm + 5 } : l)) }, GRID);
    const { departs, alerts } = merits(wrong, NOISE, 150, 2);
    expect(departs).toBeGreaterThan(0.7 * 150);
    expect(alerts.length).toBeGreaterThanOrEqual(1);
    expect(alerts[0]).toBeLessThanOrEqual(10);
  });

  it('noise twice what was stated: the spectra depart, and the estimate’s σ widens by the measured noise (×1.4–2; the priors’ part stays)', () => {
    const honest = merits(chip, NOISE, 200, 3);
    const noisy = merits(chip, 2 * NOISE, 200, 3);
    expect(noisy.departs).toBeGreaterThan(190);
    expect(noisy.sigma / honest.sigma).toBeGreaterThan(1.4);
    expect(noisy.sigma / honest.sigma).toBeLessThan(2);
  });
});

describe('bad input to the broadband fit', () => {
  const chip = buildBroadbandChip(FEW_LAYER, GRID);
  const options: BroadbandFitOptions = { chip, noise: NOISE, targetNm: 60, rateNmPerS: 0.5, ...PRIORS };

  it('a spectrum of the wrong length, a time that is not a number, or fewer than 8 usable values is not used and changes nothing', () => {
    const fit = createBroadbandFit(options);
    const clean = new Float64Array(GRID.length);
    chip.spectrum(clean, 1, 1);
    expect(fit.read(clean, 2)).not.toBeNull();
    const before = fit.estimate(2);
    expect(fit.read(clean.subarray(0, 100), 2.2)).toBeNull();
    expect(fit.read(clean, Number.NaN)).toBeNull();
    const holes = Float64Array.from(clean, (v, w) => (w < 7 ? v : Number.NaN));
    expect(fit.read(holes, 2.2)).toBeNull();
    expect(fit.estimate(2)).toEqual(before);
  });

  it('the estimate is carried from the last spectrum by the rate, its variance by P_uu + 2τP_ur + τ²P_rr (it grows)', () => {
    const fit = createBroadbandFit(options);
    const clean = new Float64Array(GRID.length);
    for (let j = 1; j <= 20; j++) {
      chip.spectrum(clean, 0.1 * j, 1);
      fit.read(clean, j / RATE_HZ);
    }
    const now = fit.estimate(4);
    const later = fit.estimate(6);
    expect(later.thicknessNm - now.thicknessNm).toBeCloseTo(2 * now.rateNmPerS, 12);
    expect(now.thicknessNm).toBeCloseTo(2, 2); // 0.5 nm/s × 4 s
    expect(later.sigmaNm).toBeGreaterThan(now.sigmaNm);
  });

  it('values that are not finite are left out of the spectrum, the rest used', () => {
    const fit = createBroadbandFit(options);
    const clean = new Float64Array(GRID.length);
    chip.spectrum(clean, 1, 1);
    clean[10] = Number.NaN;
    clean[11] = Number.POSITIVE_INFINITY;
    const m = fit.read(clean, 2);
    expect(m?.used).toBe(GRID.length - 2);
    expect(Number.isFinite(fit.estimate(2).thicknessNm)).toBe(true);
  });

  it('a time that runs backwards is taken at the last time (the clock may wobble), never a step back', () => {
    const fit = createBroadbandFit(options);
    const clean = new Float64Array(GRID.length);
    chip.spectrum(clean, 1, 1);
    fit.read(clean, 2);
    expect(fit.read(clean, 1.9)).not.toBeNull();
    expect(Number.isFinite(fit.estimate(2).sigmaNm)).toBe(true);
  });

  it('bad options are refused in one sentence naming the option', () => {
    expect(() => createBroadbandFit({ ...options, targetNm: 0 })).toThrow(/targetNm must be positive/);
    expect(() => createBroadbandFit({ ...options, rateNmPerS: Number.NaN })).toThrow(/rateNmPerS must be positive/);
    expect(() => createBroadbandFit({ ...options, noise: 0 })).toThrow(/noise must be positive/);
    expect(() => createBroadbandFit({ ...options, gainSigma: -1 })).toThrow(/gainSigma must be positive/);
    expect(() => createBroadbandFit({ ...options, indexSigma: -0.1 })).toThrow(/indexSigma must be ≥ 0/);
    expect(() => createBroadbandFit({ ...options, use: Int32Array.of(0, 1, 2) })).toThrow(/at least 8 wavelengths/);
    expect(() => createBroadbandFit({ ...options, use: Int32Array.from({ length: 10 }, (_, i) => 245 + i) })).toThrow(/outside the modelled grid/);
  });
});

describe('the broadband plan', () => {
  const input: BroadbandPlanInput = { chip: FEW_LAYER, wavelengthsNm: GRID, targetNm: 40, rateNmPerS: 0.5, sampleRateHz: RATE_HZ, shutterDelayS: DELAY_S, noise: NOISE, ...PRIORS };

  it('predicts the spectrum at the target and keeps its window inside the valid range, leaving out only insensitive wavelengths', () => {
    const plan = planBroadbandLayer({ ...input, chip: { ...FEW_LAYER, validRangeNm: [420, 880] } });
    const chip = buildBroadbandChip(FEW_LAYER, GRID);
    const want = new Float64Array(GRID.length);
    chip.spectrum(want, 40, 1);
    for (let w = 10; w <= 240; w++) expect(plan.predicted[w]).toBe(want[w]);
    expect(Number.isNaN(plan.predicted[0])).toBe(true);
    expect(plan.window.fromNm).toBeGreaterThanOrEqual(420);
    expect(plan.window.toNm).toBeLessThanOrEqual(880);
    expect(plan.window.count + plan.window.excludedInsensitive).toBe(231);
    // Every wavelength left out moves less, over the layer's last half, than a tenth of the best one.
    const S = new Float64Array(GRID.length);
    const dU = new Float64Array(GRID.length);
    const dK = new Float64Array(GRID.length);
    const slope = new Float64Array(GRID.length);
    for (const u of [20, 30, 40]) {
      chip.spectrumAndSlopes(S, dU, dK, u, 1);
      for (let w = 0; w < GRID.length; w++) slope[w] = Math.max(slope[w] as number, Math.abs(dU[w] as number));
    }
    const largest = Math.max(...slope.subarray(10, 241));
    const kept = new Set(plan.window.use);
    for (let w = 10; w <= 240; w++) expect(kept.has(w)).toBe((slope[w] as number) >= 0.1 * largest);
  });

  it('a layer below off by 0.5 nm biases the fit as the plan’s sensitivity says (within 15 %)', () => {
    const sigmaBelow = 0.5;
    const plan = planBroadbandLayer({ ...input, belowSigmaNm: [0, 0, sigmaBelow] });
    // The filter fed spectra of a chip whose top finished layer is 0.5 nm thicker than it believes, no noise.
    const believed = buildBroadbandChip(FEW_LAYER, GRID);
    const truth = buildBroadbandChip({ ...FEW_LAYER, below: FEW_LAYER.below.map((l, i) => (i === 2 ? { ...l, thicknessNm: l.thicknessNm + sigmaBelow } : l)) }, GRID);
    const r = runLayer(truth, { chip: believed, use: plan.window.use, noise: NOISE, targetNm: 40, rateNmPerS: 0.5, ...PRIORS }, { rate: 0.5, kappa: 1, gain: 1, offset: 0 }, null, { gain: 0, offset: 0, rate: 0 });
    const bias = Math.abs(r.estimatedNm - r.trueNm);
    expect(plan.belowNm).toBeGreaterThan(0);
    expect(bias / plan.belowNm).toBeGreaterThan(0.85);
    expect(bias / plan.belowNm).toBeLessThan(1.15);
  });

  it('bad input is refused in one sentence', () => {
    expect(() => planBroadbandLayer({ ...input, noise: 0 })).toThrow(/must be positive/);
    expect(() => planBroadbandLayer({ ...input, chip: { ...FEW_LAYER, validRangeNm: [1000, 1100] } })).toThrow(/no wavelength of the grid lies in the valid range/);
  });
});
