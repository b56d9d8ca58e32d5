// The layer estimator: the signal table's accuracy, exact recovery from noise-free readings, the
// Monte Carlo error at the cut against the plan's bound and the plain rules, monitor drift,
// spikes, a wandering rate, the refit after the close, and the time an update takes.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadMaterialLibrary } from '../../../src/config/load-design.ts';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { buildIndexTables, buildSignalTable, createLayerFit, signalAndSlope, type LayerFit, type LayerFitOptions, type SignalTable } from '../../../src/model/estimate/index.ts';
import { scaledDispersion } from '../../../src/model/optics/dispersion.ts';
import { buildChipMonitor, type ChipMonitor, type ChipMonitorSpec } from '../../../src/model/plan/chip-monitor.ts';
import { planRun, type LayerPlan } from '../../../src/model/plan/plan.ts';
import { DEFAULT_PRIORS, fitPrecisionBound } from '../../../src/model/plan/precision.ts';
import type { ResolvedRecipe } from '../../../src/model/plan/recipe.ts';

const root = fileURLToPath(new URL('../../../', import.meta.url));
const library = loadMaterialLibrary();
const edge = loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'), library);
const mirror = loadRecipe(join(root, 'config/recipes/mirror-1064.yaml'), library);
const edgePlan = planRun(edge, { suggest: 'none' });
const mirrorPlan = planRun(mirror, { suggest: 'none' });

const SAMPLE_RATE_HZ = 10;
const DT = 1 / SAMPLE_RATE_HZ;
const NOISE = 0.001;

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

function normal(seed: number): () => number {
  const uniform = mulberry32(seed);
  return () => {
    let u = uniform();
    while (u === 0) u = uniform();
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * uniform());
  };
}

// ---------------------------------------------------------------------------------------------
// The layers: the chip monitor built from the recipe as plan.ts builds it (design thicknesses below).

interface LayerCase {
  plan: LayerPlan;
  spec: ChipMonitorSpec;
  monitor: ChipMonitor;
  table: SignalTable;
  /** Planned chip rate, nm/s, and chip target, nm. */
  rate: number;
  target: number;
  /** Readings from the opening to the planned cut at 10 Hz (t = 0.1 s … tCut). */
  readings: number;
  tCut: number;
  /** fitPrecisionBound for exactly those readings, default priors, σ = 0.001, chip nm. */
  bound: number;
}

function layerCase(recipe: ResolvedRecipe, plan: LayerPlan): LayerCase {
  const layer = recipe.layers[plan.number - 1]!;
  const chip = recipe.chips[layer.chip]!;
  const below = [];
  for (let n = chip.fromLayer; n < plan.number; n++) {
    const l = recipe.layers[n - 1]!;
    below.push({ dispersion: l.dispersion, thicknessNm: l.targetNm * l.chipRatio });
  }
  const spec: ChipMonitorSpec = {
    incident: recipe.incident,
    substrate: chip.substrate,
    back: chip.back,
    substrateThicknessNm: chip.thicknessMm * 1e6,
    below,
    growing: layer.dispersion,
    wavelengthNm: layer.wavelengthNm,
    bandwidthNm: layer.bandwidthNm,
    angleDeg: layer.angleDeg,
    signal: layer.signal,
  };
  const monitor = buildChipMonitor(spec);
  const target = plan.chipTargetNm;
  const rate = plan.rateNmPerS * layer.chipRatio;
  const readings = Math.round((target / rate) * SAMPLE_RATE_HZ);
  const tCut = readings * DT;
  const steps = 3000;
  const step = (rate * tCut) / steps;
  const curve = Float64Array.from({ length: steps + 1 }, (_, i) => monitor.signalAt(i * step));
  const bound = fitPrecisionBound(curve, steps + 1, step, rate, SAMPLE_RATE_HZ, NOISE, DEFAULT_PRIORS);
  const table = buildSignalTable(monitor, -(0.1 * target + 5), 1.5 * target + 5);
  return { plan, spec, monitor, table, rate, target, readings, tCut, bound };
}

// A level layer and a turning-point layer where the fit is expected to shine (plan: bound ≥ 10×
// below the plain rule): edge filter layer 22 (TiO2, level at 600 nm) and mirror layer 3 (Ta2O5,
// turning point at 1064 nm).
const levelPlan = edgePlan.layers.find((l) => l.number === 22)!;
const turnPlan = mirrorPlan.layers.find((l) => l.number === 3)!;
const level = layerCase(edge, levelPlan);
const turn = layerCase(mirror, turnPlan);

function fitFor(c: LayerCase, extra: Partial<LayerFitOptions> = {}): LayerFit {
  return createLayerFit({ monitor: c.monitor, table: c.table, targetNm: c.target, rateNmPerS: c.rate, ...DEFAULT_PRIORS, noise: NOISE, ...extra });
}

interface Truth {
  d0: number;
  rate: number;
  gain: (t: number) => number;
  offset: number;
}

/** A truth drawn from the priors (the Bayesian setting of the bound: prior information added to the Fisher information). */
function drawTruth(c: LayerCase, gauss: () => number): Truth {
  const rate = c.rate * (1 + DEFAULT_PRIORS.rateSigmaFraction * gauss());
  const g = 1 + DEFAULT_PRIORS.gainSigma * gauss();
  return { d0: 0, rate, gain: () => g, offset: DEFAULT_PRIORS.offsetSigma * gauss() };
}

const thicknessOf = (truth: Truth, t: number, closeS = Number.POSITIVE_INFINITY): number => truth.d0 + truth.rate * Math.min(t, closeS);

interface CutResult {
  commandS: number;
  closeS: number;
  /** True thickness when the shutter has closed. */
  achievedNm: number;
  /** The fit's predicted closing thickness and σ at the decision. */
  predictedNm: number;
  predictedSigmaNm: number;
  /** Readings at 10 Hz: the layer's, then `afterS` s with the shutter closed. */
  fit: LayerFit;
}

/**
 * The live decision: after each reading t_k the fit proposes a command time; the command goes out
 * at max(t_cmd, t_k) as soon as t_cmd falls before the next reading (a timer, not the next
 * reading, sends it). The shutter closes one delay later; `afterS` seconds of readings follow.
 */
function cutLive(c: LayerCase, truth: Truth, gauss: () => number, afterS: number, extra: Partial<LayerFitOptions> = {}, spikes: Map<number, number> = new Map()): CutResult {
  const fit = fitFor(c, extra);
  const delay = c.plan.shutterDelayS;
  let commandS = Number.NaN;
  let predictedNm = Number.NaN;
  let predictedSigmaNm = Number.NaN;
  for (let k = 1; k < 3 * c.readings; k++) {
    const t = k * DT;
    if (Number.isFinite(commandS) && t > commandS + delay + afterS) break;
    const closeS = Number.isFinite(commandS) ? commandS + delay : Number.POSITIVE_INFINITY;
    const y = truth.gain(t) * c.monitor.signalAt(thicknessOf(truth, t, closeS)) + truth.offset + NOISE * gauss() + (spikes.get(k) ?? 0);
    fit.add(t, y);
    if (Number.isFinite(commandS)) continue;
    fit.update();
    const proposed = fit.cutTimeS(c.target, delay);
    if (proposed < t + DT) {
      commandS = Math.max(proposed, t);
      const at = fit.estimate(commandS + delay);
      predictedNm = at.thicknessNm;
      predictedSigmaNm = at.sigmaNm;
    }
  }
  const closeS = commandS + delay;
  return { commandS, closeS, achievedNm: thicknessOf(truth, closeS), predictedNm, predictedSigmaNm, fit };
}

// ---------------------------------------------------------------------------------------------

describe('the signal table', () => {
  it('interpolates S and dS/dd far below a reading’s noise', () => {
    // Accuracy derived in signal-table.ts: ≈ 6e-12 for the fastest curves at h = 0.1 nm; here
    // checked against the monitor itself at 2,000 random points of each table.
    const uniform = mulberry32(3);
    const out = new Float64Array(2);
    for (const c of [level, turn]) {
      const span = (c.table.count - 1) * c.table.stepNm;
      let worstValue = 0;
      let worstSlope = 0;
      for (let i = 0; i < 2000; i++) {
        const d = c.table.fromNm + uniform() * span;
        signalAndSlope(c.table, d, out);
        const h = 1e-3; // central difference: truncation h²·|S‴|/6 < 1e-11, rounding ≈ 1e-13 per nm
        const slope = (c.monitor.signalAt(d + h) - c.monitor.signalAt(d - h)) / (2 * h);
        worstValue = Math.max(worstValue, Math.abs(out[0]! - c.monitor.signalAt(d)));
        worstSlope = Math.max(worstSlope, Math.abs(out[1]! - slope));
      }
      expect(worstValue).toBeLessThan(1e-10);
      expect(worstSlope).toBeLessThan(1e-9);
    }
  });

  it('outside its range falls back to the monitor itself', () => {
    const out = new Float64Array(2);
    const d = level.table.fromNm + level.table.count * level.table.stepNm + 3.3;
    signalAndSlope(level.table, d, out);
    expect(out[0]).toBe(level.monitor.signalAt(d));
    const h = 1e-3;
    expect(Math.abs(out[1]! - (level.monitor.signalAt(d + h) - level.monitor.signalAt(d - h)) / (2 * h))).toBeLessThan(1e-9);
  });
});

describe('options', () => {
  it('refuses a non-positive noise, rate, target or prior width; Infinity is no prior', () => {
    expect(() => fitFor(level, { noise: 0 })).toThrow(RangeError);
    expect(() => fitFor(level, { rateNmPerS: -1 })).toThrow(RangeError);
    expect(() => fitFor(level, { targetNm: 0 })).toThrow(RangeError);
    expect(() => fitFor(level, { gainSigma: 0 })).toThrow(RangeError);
    expect(() => fitFor(level, { offsetSigma: Number.NaN })).toThrow(RangeError);
    // Without the offset prior the fit still runs on a curve that fixes g and o itself.
    const fit = fitFor(level, { offsetSigma: Number.POSITIVE_INFINITY });
    for (let k = 1; k <= level.readings; k++) {
      fit.add(k * DT, level.monitor.signalAt(level.rate * k * DT));
      fit.update();
    }
    const e = fit.estimate(level.tCut);
    expect(Math.abs(e.thicknessNm - level.rate * level.tCut)).toBeLessThan(level.bound);
    expect(Number.isFinite(e.sigmaNm)).toBe(true);
  });
});

describe('noise-free readings', () => {
  for (const [name, c] of [
    ['level layer (edge 22)', level],
    ['turning-point layer (mirror 3)', turn],
  ] as const) {
    it(`${name}: recovers d₀, r, g, o to 1e-6 and lands the cut on the target to 1e-6 nm`, () => {
      // Readings from the monitor itself (not the table); the fit is told σ = 1e-6, so the priors
      // weigh nothing beside the data and the answer is the truth.
      const truth = { d0: 0.7, rate: 1.03 * c.rate, g: 1.004, o: 0.0015 };
      const fit = fitFor(c, { noise: 1e-6 });
      const last = Math.round(0.95 * (c.target / truth.rate) * SAMPLE_RATE_HZ);
      for (let k = 1; k <= last; k++) {
        const t = k * DT;
        fit.add(t, truth.g * c.monitor.signalAt(truth.d0 + truth.rate * t) + truth.o);
        fit.update();
      }
      // A few more updates let every block of readings be re-linearised at the solution.
      for (let i = 0; i < 60; i++) fit.update();
      const e = fit.estimate(0);
      expect(Math.abs(e.thicknessNm / truth.d0 - 1)).toBeLessThan(1e-6);
      expect(Math.abs(e.rateNmPerS / truth.rate - 1)).toBeLessThan(1e-6);
      expect(Math.abs(e.gain / truth.g - 1)).toBeLessThan(1e-6);
      expect(Math.abs(e.offset / truth.o - 1)).toBeLessThan(1e-6);
      expect(e.spikes).toBe(0);
      expect(e.readings).toBe(last);
      const delay = c.plan.shutterDelayS;
      const command = fit.cutTimeS(c.target, delay);
      expect(command).toBeGreaterThan(last * DT);
      expect(Math.abs(truth.d0 + truth.rate * (command + delay) - c.target)).toBeLessThan(1e-6);
    });
  }

  /** The layer's chip with the growing layer's index × `factor`. */
  const withIndex = (c: LayerCase, factor: number): ChipMonitor => buildChipMonitor({ ...c.spec, growing: scaledDispersion(c.spec.growing, factor, 0) });

  for (const [name, c] of [['level (edge 22)', level], ['turning point (mirror 3)', turn]] as const) {
    it(`${name}, index 1.5 % above the design's: the index correction keeps u = κ·d unbiased, without it u is off`, () => {
      // The readings come from the chip with the growing layer at n·1.015 and physical thickness
      // u/1.015: the optical thickness is the design-index curve's, the swing's depth is not.
      const kappa = 1.015;
      const truth = withIndex(c, kappa);
      const delta = 0.01;
      const indexTables = buildIndexTables(c.table, withIndex(c, 1 + delta), withIndex(c, 1 - delta), delta);
      const corrected = fitFor(c, { noise: 1e-5, indexSigma: 0.03, indexTables, gainSigma: 1e-4, offsetSigma: 1e-4 });
      const plain = fitFor(c, { noise: 1e-5, gainSigma: 1e-4, offsetSigma: 1e-4 });
      const last = Math.round(0.9 * c.readings);
      for (let k = 1; k <= last; k++) {
        const t = k * DT;
        const y = truth.signalAt((c.rate * t) / kappa);
        corrected.add(t, y);
        plain.add(t, y);
        corrected.update();
        plain.update();
      }
      for (let i = 0; i < 60; i++) {
        corrected.update();
        plain.update();
      }
      const uTrue = c.rate * c.tCut;
      const withCorrection = corrected.estimate(c.tCut);
      const without = plain.estimate(c.tCut);
      // The model is exact to (κ−1)³ and to the central differences' δ²: u to well under the bound.
      expect(Math.abs(withCorrection.thicknessNm - uTrue)).toBeLessThan(0.2 * c.bound);
      expect(Math.abs(withCorrection.indexFactor - kappa)).toBeLessThan(1e-3);
      // Without it the depth of the swing pulls u, with the gain and offset held (here by 1 and 2.6 nm: 50–100 bounds).
      expect(Math.abs(without.thicknessNm - uTrue)).toBeGreaterThan(20 * Math.abs(withCorrection.thicknessNm - uTrue));
    });
  }

  it('index tables: S_κ and S_κκ match a direct difference of the curves at κ = 1 ± 0.005', () => {
    const c = turn;
    const delta = 0.01;
    const tables = buildIndexTables(c.table, withIndex(c, 1 + delta), withIndex(c, 1 - delta), delta);
    const e = 0.005;
    const plus = withIndex(c, 1 + e);
    const minus = withIndex(c, 1 - e);
    const out = new Float64Array(2);
    for (const u of [5, 40, 90, 120]) {
      const fPlus = plus.signalAt(u / (1 + e));
      const fMinus = minus.signalAt(u / (1 - e));
      signalAndSlope(tables.first, u, out);
      // Central difference over ±e: error e²/6·F‴, far below 1e-4 for these smooth curves.
      expect(Math.abs((out[0] as number) - (fPlus - fMinus) / (2 * e))).toBeLessThan(1e-4);
      signalAndSlope(tables.second, u, out);
      expect(Math.abs((out[0] as number) - (fPlus - 2 * c.monitor.signalAt(u) + fMinus) / (e * e))).toBeLessThan(1e-2);
    }
  });

  it('an index correction without its tables, or on another grid, is refused', () => {
    const c = turn;
    expect(() => fitFor(c, { indexSigma: 0.02 })).toThrow(/indexTables/);
    const other = buildSignalTable(c.monitor, 0, 50);
    const tables = buildIndexTables(other, c.monitor, c.monitor, 0.01);
    expect(() => fitFor(c, { indexSigma: 0.02, indexTables: tables })).toThrow(/grid/);
  });

  it('a rate ramp after the opening: skipping the first rampS seconds, d₀ absorbs the lag r·τ', () => {
    // d(t) = r·(t − τ(1 − e^{−t/τ})) → r·(t − τ) for t ≫ τ (a first-order ramp, as sim/source-rate.ts).
    const c = level;
    const tau = 2;
    const truthD = (t: number): number => c.rate * (t - tau * -Math.expm1(-t / tau));
    const fit = fitFor(c, { noise: 1e-5, rampS: 5 * tau });
    for (let k = 1; k <= c.readings; k++) {
      const t = k * DT;
      fit.add(t, c.monitor.signalAt(truthD(t)));
      fit.update();
    }
    for (let i = 0; i < 60; i++) fit.update();
    const e = fit.estimate(c.tCut);
    expect(e.readings).toBe(c.readings - 5 * tau * SAMPLE_RATE_HZ + 1);
    // Left in the line after 5τ: r·τ·e^{−5} ≈ 3e-3 nm at t = 5τ, decaying (derived).
    expect(Math.abs(fit.estimate(0).thicknessNm + c.rate * tau)).toBeLessThan(0.01);
    expect(Math.abs(e.thicknessNm - truthD(c.tCut))).toBeLessThan(1e-3);
  });
});

describe('Monte Carlo at σ = 0.001, 10 Hz: the error at the planned cut time against the bound', () => {
  // 200 runs: the rms of 200 Gaussian errors has a relative standard error of 1/√400 = 5 %, so
  // 1.3× is 6 standard errors above the bound and 0.8× 4 below it.
  const runs = 200;
  for (const [name, c] of [
    ['level layer (edge 22)', level],
    ['turning-point layer (mirror 3)', turn],
  ] as const) {
    it(`${name}: rms within 1.3× of fitPrecisionBound, ≥ 10× better than the plain rule`, { timeout: 180_000 }, () => {
      const gauss = normal(20240 + c.plan.number);
      let sum = 0;
      let sumSq = 0;
      let sigma = 0;
      for (let run = 0; run < runs; run++) {
        const truth = drawTruth(c, gauss);
        const fit = fitFor(c);
        for (let k = 1; k <= c.readings; k++) {
          const t = k * DT;
          fit.add(t, truth.gain(t) * c.monitor.signalAt(thicknessOf(truth, t)) + truth.offset + NOISE * gauss());
          fit.update();
        }
        const e = fit.estimate(c.tCut);
        const error = e.thicknessNm - thicknessOf(truth, c.tCut);
        sum += error;
        sumSq += error * error;
        sigma += e.sigmaNm;
      }
      const rms = Math.sqrt(sumSq / runs);
      expect(rms / c.bound).toBeLessThan(1.3);
      expect(rms / c.bound).toBeGreaterThan(0.8);
      // No bias beyond sampling (4 standard errors of the mean).
      expect(Math.abs(sum / runs)).toBeLessThan((4 * rms) / Math.sqrt(runs));
      // The fit's own σ is the bound (same information matrix, at the fitted parameters).
      expect(Math.abs(sigma / runs / c.bound - 1)).toBeLessThan(0.1);
      // The plain rule of the plan (levelRulePrecision / turningPointRulePrecision), chip nm.
      const plain = c.plan.plainRulePrecisionNm * (c.plan.chipTargetNm / c.plan.targetNm);
      expect(plain / rms).toBeGreaterThan(10);
    });
  }
});

describe('a rate ramp at the opening (τ = 2 s, as config/sim/typical.yaml)', () => {
  it('level layer (edge 22): with rampS = 5τ the rms at the cut stays within 1.3× of the bound', { timeout: 60_000 }, () => {
    // Without rampS the bent first seconds bias d₀ (measured: ≈ 1.9× the bound on this layer);
    // dropping them costs almost no information. 80 runs: relative standard error 8 %.
    const c = level;
    const tau = 2;
    const runs = 80;
    const gauss = normal(606);
    let sumSq = 0;
    for (let run = 0; run < runs; run++) {
      const truth = drawTruth(c, gauss);
      const fit = fitFor(c, { rampS: 5 * tau });
      let d = 0;
      for (let k = 1; k <= c.readings; k++) {
        const t = k * DT;
        d = truth.rate * (t - tau * -Math.expm1(-t / tau));
        fit.add(t, truth.gain(t) * c.monitor.signalAt(d) + truth.offset + NOISE * gauss());
        fit.update();
      }
      sumSq += (fit.estimate(c.tCut).thicknessNm - d) ** 2;
    }
    expect(Math.sqrt(sumSq / runs) / c.bound).toBeLessThan(1.3);
  });
});

describe('monitor drift, offset and spikes', () => {
  it('a gain drift of 0.5 %/h and an offset of 0.003 move the cut thickness by less than 2σ of the bound', { timeout: 60_000 }, () => {
    // Same noise with and without the drift (the offset is 0.6 σ of its prior; the drift is not
    // modelled: 0.04 % of gain over the layer, ≈ 0.3σ of a reading).
    for (const c of [level, turn]) {
      for (let seed = 1; seed <= 8; seed++) {
        const reference = cutLive(c, { d0: 0, rate: c.rate, gain: () => 1, offset: 0 }, normal(seed), 0);
        const drifting = cutLive(c, { d0: 0, rate: c.rate, gain: (t) => 1 + (0.005 * t) / 3600, offset: 0.003 }, normal(seed), 0);
        expect(Math.abs(drifting.achievedNm - reference.achievedNm)).toBeLessThan(2 * c.bound);
        // And the cut itself lands on target within the bound's reach (4σ).
        expect(Math.abs(drifting.achievedNm - c.target)).toBeLessThan(4 * c.bound);
      }
    }
  });

  it('five 5 % spikes (one on the last reading) move the estimate by less than 1σ and are counted', () => {
    for (const c of [level, turn]) {
      const at = [0.2, 0.45, 0.6, 0.85].map((f) => Math.round(f * c.readings));
      at.push(c.readings);
      const truth: Truth = { d0: 0, rate: c.rate, gain: () => 1, offset: 0 };
      const run = (spikes: boolean): ReturnType<LayerFit['estimate']> => {
        const gauss = normal(77);
        const fit = fitFor(c);
        for (let k = 1; k <= c.readings; k++) {
          const t = k * DT;
          const spike = spikes && at.includes(k) ? (k % 2 === 0 ? 0.05 : -0.05) : 0;
          fit.add(t, c.monitor.signalAt(thicknessOf(truth, t)) + NOISE * gauss() + spike);
          fit.update();
        }
        return fit.estimate(c.tCut);
      };
      const clean = run(false);
      const spiked = run(true);
      expect(clean.spikes).toBe(0);
      expect(spiked.spikes).toBe(5);
      expect(Math.abs(spiked.thicknessNm - clean.thicknessNm)).toBeLessThan(c.bound);
      expect(Math.abs(clean.thicknessNm - thicknessOf(truth, c.tCut))).toBeLessThan(4 * c.bound);
    }
  });
});

describe('a wandering rate: ±2 % rms Ornstein–Uhlenbeck, 30 s correlation', () => {
  const wander = 0.02;
  const correlationS = 30;
  const runs = 100;

  /**
   * The rate r_p·(1 + δ + x(t)) with x an Ornstein–Uhlenbeck process, and the thickness
   * r_p·((1 + δ)t + ∫x), both by the exact joint update of x and its integral over each step
   * (D. T. Gillespie, Phys. Rev. E 54, 2084 (1996)): with μ = e^{−Δ/τ},
   * Var x′ = σ²(1 − μ²), Var ∫ = σ²τ²(2Δ/τ − 3 + 4μ − μ²), Cov = σ²τ(1 − μ)².
   */
  function wanderingThickness(c: LayerCase, delta: number, gauss: () => number): Float64Array {
    const mu = Math.exp(-DT / correlationS);
    const sx = wander * Math.sqrt(1 - mu * mu);
    const vy = wander ** 2 * correlationS ** 2 * ((2 * DT) / correlationS - 3 + 4 * mu - mu * mu);
    const kxy = wander ** 2 * correlationS * (1 - mu) ** 2;
    const out = new Float64Array(c.readings);
    let x = wander * gauss();
    let integral = 0;
    for (let k = 0; k < c.readings; k++) {
      const n1 = gauss();
      const n2 = gauss();
      integral += x * correlationS * (1 - mu) + (kxy / sx) * n1 + Math.sqrt(vy - (kxy / sx) ** 2) * n2;
      x = x * mu + sx * n1;
      out[k] = c.rate * ((1 + delta) * (k + 1) * DT + integral);
    }
    return out;
  }

  /**
   * What any estimator can do with this wander: the Kalman filter of the model linearised on the
   * planned trajectory, states (d, x, δ, g, o) (Kalman, J. Basic Eng. 82, 35 (1960)); for a
   * linear-Gaussian model its posterior variance is the Bayesian bound (Van Trees, Detection,
   * Estimation and Modulation Theory I, 2.4). With x ≡ 0 it reproduces fitPrecisionBound.
   */
  function wanderBound(c: LayerCase, sigmaX: number): number {
    const n = 5;
    const at = (i: number, j: number): number => i * n + j;
    let p = new Float64Array(n * n);
    p[at(0, 0)] = c.target ** 2;
    p[at(1, 1)] = sigmaX ** 2;
    p[at(2, 2)] = DEFAULT_PRIORS.rateSigmaFraction ** 2;
    p[at(3, 3)] = DEFAULT_PRIORS.gainSigma ** 2;
    p[at(4, 4)] = DEFAULT_PRIORS.offsetSigma ** 2;
    const mu = Math.exp(-DT / correlationS);
    // d′ = d + r_p·Δ·δ + r_p·τ(1 − μ)·x + r_p·(∫ noise); x′ = μx + noise.
    const f = new Float64Array(n * n);
    for (let i = 0; i < n; i++) f[at(i, i)] = 1;
    f[at(0, 1)] = c.rate * correlationS * (1 - mu);
    f[at(0, 2)] = c.rate * DT;
    f[at(1, 1)] = mu;
    const q00 = c.rate ** 2 * sigmaX ** 2 * correlationS ** 2 * ((2 * DT) / correlationS - 3 + 4 * mu - mu * mu);
    const q01 = c.rate * sigmaX ** 2 * correlationS * (1 - mu) ** 2;
    const q11 = sigmaX ** 2 * (1 - mu * mu);
    const fp = new Float64Array(n * n);
    const next = new Float64Array(n * n);
    const H = new Float64Array(n);
    const ph = new Float64Array(n);
    const h = 1e-3;
    for (let k = 1; k <= c.readings; k++) {
      // Predict: P ← F P Fᵀ + Q.
      for (let i = 0; i < n; i++) {
        for (let j = 0; j < n; j++) {
          let sum = 0;
          for (let m = 0; m < n; m++) sum += f[at(i, m)]! * p[at(m, j)]!;
          fp[at(i, j)] = sum;
        }
      }
      for (let i = 0; i < n; i++) {
        for (let j = 0; j < n; j++) {
          let sum = 0;
          for (let m = 0; m < n; m++) sum += fp[at(i, m)]! * f[at(j, m)]!;
          next[at(i, j)] = sum;
        }
      }
      p = next.slice();
      p[at(0, 0)] = p[at(0, 0)]! + q00;
      p[at(0, 1)] = p[at(0, 1)]! + q01;
      p[at(1, 0)] = p[at(1, 0)]! + q01;
      p[at(1, 1)] = p[at(1, 1)]! + q11;
      // Update with one reading: ∂y/∂(d, x, δ, g, o) = (S′, 0, 0, S, 1).
      const d = c.rate * k * DT;
      H[0] = (c.monitor.signalAt(d + h) - c.monitor.signalAt(d - h)) / (2 * h);
      H[3] = c.monitor.signalAt(d);
      H[4] = 1;
      let innovation = NOISE ** 2;
      for (let i = 0; i < n; i++) {
        let sum = 0;
        for (let m = 0; m < n; m++) sum += p[at(i, m)]! * H[m]!;
        ph[i] = sum;
        innovation += H[i]! * sum;
      }
      for (let i = 0; i < n; i++) for (let j = 0; j < n; j++) p[at(i, j)] = p[at(i, j)]! - (ph[i]! * ph[j]!) / innovation;
    }
    return Math.sqrt(p[at(0, 0)]!);
  }

  for (const [name, c] of [
    ['level layer (edge 22)', level],
    ['turning-point layer (mirror 3)', turn],
  ] as const) {
    it(`${name}: the bound with this wander; windowS = 90 s within 2× of it; on the crystal's clock within 1.3× of the plan's bound`, { timeout: 180_000 }, () => {
      // The filter without wander is the plan's bound (a check of both computations).
      expect(Math.abs(wanderBound(c, 0) / c.bound - 1)).toBeLessThan(0.01);
      const optimum = wanderBound(c, wander);
      // No estimator on the readings' own time can come within 2× of the plan's bound here.
      expect(optimum / c.bound).toBeGreaterThan(5);
      const gauss = normal(31 + c.plan.number);
      let windowSq = 0;
      let clockSq = 0;
      for (let run = 0; run < runs; run++) {
        const rate = DEFAULT_PRIORS.rateSigmaFraction * gauss();
        const g = 1 + DEFAULT_PRIORS.gainSigma * gauss();
        const o = DEFAULT_PRIORS.offsetSigma * gauss();
        const thickness = wanderingThickness(c, rate, gauss);
        // The crystal: the same thickness over a tooling ratio known to 1.5 %, read with 0.002 nm
        // rms (0.05 Hz over ≈ 33 Hz/nm for TiO2 on a 6 MHz crystal: Sauerbrey sensitivity
        // 81.5 Hz cm²/µg, physics-notes.md, × 4 g/cm³ × 1e-7 cm; derived).
        const ratio = 1 + 0.015 * gauss();
        const windowed = fitFor(c, { windowS: 3 * correlationS });
        const clocked = fitFor(c);
        let clock = 0;
        for (let k = 0; k < c.readings; k++) {
          const y = g * c.monitor.signalAt(thickness[k]!) + o + NOISE * gauss();
          windowed.add((k + 1) * DT, y);
          windowed.update();
          clock = (thickness[k]! / ratio + 0.002 * gauss()) / c.rate;
          clocked.add(clock, y);
          clocked.update();
        }
        const truth = thickness[c.readings - 1]!;
        windowSq += (windowed.estimate(c.tCut).thicknessNm - truth) ** 2;
        clockSq += (clocked.estimate(clock).thicknessNm - truth) ** 2;
        // The window holds 90 s of readings (the boundary reading in or out by rounding).
        expect(Math.abs(windowed.estimate(c.tCut).readings - 3 * correlationS * SAMPLE_RATE_HZ)).toBeLessThanOrEqual(1);
      }
      // 100 runs: relative standard error of an rms 7 %.
      expect(Math.sqrt(windowSq / runs) / optimum).toBeLessThan(2);
      expect(Math.sqrt(clockSq / runs) / c.bound).toBeLessThan(1.3);
    });
  }
});

describe('after the cut', () => {
  it('finalThickness with 20 s of readings after the close is at least as precise as the prediction at the cut', { timeout: 120_000 }, () => {
    const runs = 60;
    for (const c of [level, turn]) {
      const gauss = normal(4242 + c.plan.number);
      let cutSq = 0;
      let finalSq = 0;
      for (let run = 0; run < runs; run++) {
        const truth = drawTruth(c, gauss);
        const r = cutLive(c, truth, gauss, 20);
        const final = r.fit.finalThickness(r.closeS);
        expect(final.sigmaNm).toBeLessThanOrEqual(r.predictedSigmaNm);
        expect(final.indexFactor).toBe(1);
        cutSq += (r.predictedNm - r.achievedNm) ** 2;
        finalSq += (final.thicknessNm - r.achievedNm) ** 2;
      }
      expect(Math.sqrt(finalSq / runs)).toBeLessThanOrEqual(Math.sqrt(cutSq / runs));
    }
  });
});

describe('time per reading', () => {
  it('add + update at 5,000 readings: p99 well under the 1 ms budget (asserted < 5 ms on a shared machine)', () => {
    const c = turn;
    const count = 5000;
    const gauss = normal(5);
    const values = Float64Array.from({ length: count }, (_, i) => c.monitor.signalAt(c.rate * (i + 1) * DT) + NOISE * gauss());
    const times = new Float64Array(count);
    for (let pass = 0; pass < 2; pass++) {
      // The first pass warms the JIT up, as the first layer of a run would.
      const fit = fitFor(c);
      for (let i = 0; i < count; i++) {
        const start = performance.now();
        fit.add((i + 1) * DT, values[i]!);
        fit.update();
        times[i] = performance.now() - start;
      }
      expect(fit.estimate(count * DT).readings).toBe(count);
    }
    const sorted = Float64Array.from(times).sort();
    const p99 = sorted[Math.floor(0.99 * count)]!;
    expect(p99).toBeLessThan(5);
    // Bounded work: the last thousand readings cost no more than the first thousand, within noise.
    const head = Float64Array.from(times.subarray(500, 1500)).sort()[500]!;
    const tail = Float64Array.from(times.subarray(4000, 5000)).sort()[500]!;
    expect(tail).toBeLessThan(4 * head + 0.01);
  });
});
