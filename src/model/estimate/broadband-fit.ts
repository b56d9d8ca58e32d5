/**
 * The broadband estimator of one layer: every reading is a whole spectrum, fitted with the exact
 * model of the chip (the finished layers as the refits know them, fixed; the growing layer free).
 *
 * Per spectrum y(λ) = g·S(λ; u, κ) + o + ε(λ), ε white with rms σ(λ): u the growing layer's
 * thickness at the design index with its optical thickness (physical d = u/κ; what the cut
 * compares with the target, as the single-wavelength fit), κ the scale on the material's
 * dispersive n, g and o the monitor's gain and offset.
 *
 * Across spectra (how successive thicknesses combine with the growth): the state
 * x = (u, r, κ, g, o) follows a near-constant-rate model between spectra Δt apart,
 *   u ← u + r·Δt,  r a random walk (rateWander),  κ constant,  g and o random walks (gainDrift, offsetDrift),
 * and each spectrum is the measurement of an iterated extended Kalman filter, whose update is
 * the Gauss–Newton minimisation of the spectrum's χ² plus the predicted state's quadratic penalty
 * (Bell and Cathey, IEEE Trans. Autom. Control 38, 294 (1993): the iterated EKF update is
 * Gauss–Newton on the MAP cost). So the rate is learnt from the run of thicknesses, every spectrum
 * adds its information on u at its own instant, old spectra count less as the rate may have
 * wandered since, g and o follow a slow drift with the previous spectra as their prior, and κ
 * gathers the information of the whole layer. The estimate at any instant is the filtered state
 * carried forward by the rate, with the covariance carried the same way
 * (σ_u(t)² = P_uu + 2τP_ur + τ²P_rr, τ = t − t_last); the cut goes out when u, one shutter delay
 * ahead, reaches the target.
 *
 * σ: the posterior covariance, with the noise variance scaled by the measured reduced χ²
 * (smoothed over the last spectra, never below a quarter): a spectrum that departs from the model
 * widens the estimate's σ instead of hiding in it.
 *
 * Merit: the reduced χ² of each spectrum against the nominal noise, Σ(e/σ)²/(N − 4). Beyond the
 * Wilson–Hilferty quantile at `departureZ` standard deviations (Wilson and Hilferty, PNAS 17,
 * 684 (1931)) the spectrum departs; `departureCount` departing spectra in a row make an alert due.
 *
 * Work per spectrum: ≤ MAX_ITERATIONS passes over the used wavelengths, three layer evaluations
 * each (value and forward differences), then 5×5 algebra. Nothing is allocated after creation.
 */
import { choleskyInto, choleskyInverseInto, choleskySolveInto } from '../numeric/dense.ts';
import type { BroadbandChip } from './broadband-chip.ts';

export interface BroadbandFitOptions {
  chip: BroadbandChip;
  /** Grid indices fitted (the plan's window); default the whole grid. */
  use?: Int32Array;
  /** rms of one value per wavelength (fraction): one for all, or one per grid point. */
  noise: number | Float64Array;
  /** The layer's chip target, nm (sizes the trust region and the default start prior). */
  targetNm: number;
  /** Planned chip rate of u, nm per unit of the fit's clock, and its prior rms (fraction). */
  rateNmPerS: number;
  rateSigmaFraction: number;
  /** How far the rate wanders, as a fraction of it per √s of the clock (default 0.003). */
  rateWander?: number;
  /** Prior of κ: mean (default 1) and rms (0: κ fixed). */
  indexFactor?: number;
  indexSigma: number;
  /** Priors of the gain (about 1) and offset (about 0) at the layer's start, rms. */
  gainSigma: number;
  offsetSigma: number;
  /** Random-walk drift of gain and offset, rms per √s (defaults 0.002 and 0.001). */
  gainDrift?: number;
  offsetDrift?: number;
  /** Prior rms of u at the clock's zero, nm (default 0.5: the layer starts with the shutter). */
  startSigmaNm?: number;
  /** Departure threshold in standard deviations of χ² (default 5) and the run of spectra that makes an alert due (default 5). */
  departureZ?: number;
  departureCount?: number;
}

export interface BroadbandEstimate {
  /** u, nm on the chip: thickness at the design index with the layer's optical thickness. */
  thicknessNm: number;
  sigmaNm: number;
  /** Physical thickness u/κ, nm. */
  physicalNm: number;
  rateNmPerS: number;
  indexFactor: number;
  indexSigma: number;
  gain: number;
  offset: number;
  /** Spectra taken. */
  spectra: number;
}

/** What one spectrum showed. */
export interface SpectrumMerit {
  /** Σ(e/σ)²/(N − 4) against the nominal noise. */
  reducedChiSquare: number;
  /** The threshold beyond which the spectrum departs from the model. */
  threshold: number;
  departs: boolean;
  /** Departing spectra in a row, this one included. */
  departingRun: number;
  /** True at the spectrum that makes the run reach departureCount (once per episode). */
  alertDue: boolean;
  /** Wavelengths used (finite values in the window). */
  used: number;
  iterations: number;
}

export interface BroadbandFit {
  /**
   * Takes a spectrum on the chip's grid at the fit's clock `timeS` (s since the opening, or the
   * crystal's clock); values that are not finite are left out. A spectrum of the wrong length,
   * or with fewer than 8 usable values, is not used: null.
   */
  read(values: Float64Array, timeS: number): SpectrumMerit | null;
  /** The estimate at clock `timeS`, carried from the last spectrum by the rate. */
  estimate(timeS: number): BroadbandEstimate;
  /** When the cut command should go out so that u reaches `targetNm` once the shutter has closed: t_target − delay. */
  cutTimeS(targetNm: number, shutterDelayS: number): number;
  /** The model spectrum at the present estimate (or `uNm`), for display: written into `out` at the used indices. */
  predicted(out: Float64Array, uNm?: number): Float64Array;
  /** The used grid indices, and the grid, nm. */
  readonly use: Int32Array;
  readonly wavelengthsNm: Float64Array;
  /** The last spectrum's merit (null before one). */
  readonly merit: SpectrumMerit | null;
}

const P = 5;
const U = 0;
const R = 1;
const K = 2;
const G = 3;
const O = 4;
const MAX_ITERATIONS = 4;
/** Converged when a step moves u by less than this, nm (far below any fit's σ). */
const SETTLED_NM = 1e-4;
/** The reduced χ² is smoothed over ~1/NOISE_SMOOTHING spectra for the noise scale. */
const NOISE_SMOOTHING = 0.1;
const MIN_NOISE_SCALE = 0.25;

/**
 * The reduced-χ² value that ν degrees of freedom exceed with the probability of a normal beyond
 * z σ: ((1 − 2/(9ν)) + z·√(2/(9ν)))³ (Wilson and Hilferty 1931).
 */
export function departureThreshold(dof: number, z: number): number {
  const a = 2 / (9 * dof);
  return (1 - a + z * Math.sqrt(a)) ** 3;
}

export function createBroadbandFit(options: BroadbandFitOptions): BroadbandFit {
  const { chip, targetNm, rateNmPerS } = options;
  const nW = chip.wavelengthsNm.length;
  if (!(targetNm > 0)) throw new RangeError('broadband fit: targetNm must be positive');
  if (!(rateNmPerS > 0)) throw new RangeError('broadband fit: rateNmPerS must be positive');
  const use = options.use ?? chip.modelled;
  if (use.length < 8) throw new RangeError('broadband fit: the window needs at least 8 wavelengths');
  const modelled = new Set(chip.modelled);
  for (const w of use) if (!modelled.has(w)) throw new RangeError('broadband fit: a window index lies outside the modelled grid');
  const invVar = new Float64Array(nW);
  for (let w = 0; w < nW; w++) {
    const s = typeof options.noise === 'number' ? options.noise : (options.noise[w] as number);
    if (!(s > 0)) throw new RangeError('broadband fit: the noise must be positive at every wavelength');
    invVar[w] = 1 / (s * s);
  }
  const positive = (v: number, what: string): number => {
    if (!(v > 0 && Number.isFinite(v))) throw new RangeError(`broadband fit: ${what} must be positive`);
    return v;
  };
  const wander: Wander = {
    rateNmPerS: (options.rateWander ?? DEFAULT_WANDER.rate) * rateNmPerS,
    gain: options.gainDrift ?? DEFAULT_WANDER.gain,
    offset: options.offsetDrift ?? DEFAULT_WANDER.offset,
  };
  const indexSigma = options.indexSigma;
  if (!(indexSigma >= 0)) throw new RangeError('broadband fit: indexSigma must be ≥ 0');
  const departureZ = options.departureZ ?? 5;
  const departureCount = options.departureCount ?? 5;
  const maxStepNm = Math.max(2, 0.1 * targetNm);

  // The state at the last spectrum and its covariance.
  const x = Float64Array.of(0, rateNmPerS, options.indexFactor ?? 1, 1, 0);
  const cov = new Float64Array(P * P);
  cov[U * P + U] = positive(options.startSigmaNm ?? 0.5, 'startSigmaNm') ** 2;
  cov[R * P + R] = (positive(options.rateSigmaFraction, 'rateSigmaFraction') * rateNmPerS) ** 2;
  // κ fixed: a vanishing variance keeps the algebra one shape (its information is then huge, its steps nil).
  cov[K * P + K] = indexSigma > 0 ? indexSigma ** 2 : 1e-18;
  cov[G * P + G] = positive(options.gainSigma, 'gainSigma') ** 2;
  cov[O * P + O] = positive(options.offsetSigma, 'offsetSigma') ** 2;
  let lastS = 0;
  let spectra = 0;
  let noiseScale = 1;
  let departingRun = 0;
  let merit: SpectrumMerit | null = null;

  // Scratch, allocated once.
  const S = new Float64Array(nW);
  const dU = new Float64Array(nW);
  const dK = new Float64Array(nW);
  const info = new Float64Array(P * P);
  const A = new Float64Array(P * P);
  const L = new Float64Array(P * P);
  const b = new Float64Array(P);
  const step = new Float64Array(P);
  const theta = new Float64Array(P);
  const column = new Float64Array(P);

  function read(values: Float64Array, timeS: number): SpectrumMerit | null {
    if (values.length !== nW || !Number.isFinite(timeS)) return null;
    let used = 0;
    for (let i = 0; i < use.length; i++) if (Number.isFinite(values[use[i] as number])) used++;
    if (used < 8) return null;
    carryForward(x, cov, timeS - lastS, wander);
    lastS = Math.max(lastS, timeS);
    // The prior's information Λ = P⁻¹ (the predicted state's penalty).
    if (!choleskyInto(L, cov, P)) return null;
    choleskyInverseInto(info, L, P, column);
    theta.set(x);
    const weightScale = 1 / Math.max(noiseScale, MIN_NOISE_SCALE);
    let chi2 = 0;
    let iterations = 0;
    for (let it = 0; it < MAX_ITERATIONS; it++) {
      iterations++;
      const u = theta[U] as number;
      const kappa = theta[K] as number;
      const g = theta[G] as number;
      const o = theta[O] as number;
      chip.spectrumAndSlopes(S, dU, dK, u, kappa, use);
      // Normal equations of the MAP cost at θ: (Σ w h hᵀ + Λ) Δ = Σ w h e − Λ(θ − x̂).
      A.set(info);
      chi2 = addSpectrumInformation(A, b, S, dU, dK, values, use, invVar, weightScale, g, o);
      for (let r = 0; r < P; r++) {
        let sum = 0;
        for (let c = 0; c < P; c++) sum += (info[r * P + c] as number) * ((theta[c] as number) - (x[c] as number));
        b[r] = (b[r] as number) - sum;
      }
      if (!choleskyInto(L, A, P)) return null;
      choleskySolveInto(step, L, b, P);
      // A trust region on u (and κ) against a far first guess; a step never takes u below zero.
      const shrink = Math.min(1, maxStepNm / Math.abs(step[U] as number), 0.05 / Math.abs(step[K] as number));
      for (let j = 0; j < P; j++) theta[j] = (theta[j] as number) + shrink * (step[j] as number);
      if ((theta[U] as number) < 0) theta[U] = 0;
      if (shrink === 1 && Math.abs(step[U] as number) < SETTLED_NM) break;
    }
    // Posterior: θ, with the covariance of the last linearisation.
    x.set(theta);
    choleskyInverseInto(cov, L, P, column);
    spectra++;
    const dof = Math.max(1, used - 4);
    const reduced = chi2 / dof;
    noiseScale = spectra === 1 ? reduced : (1 - NOISE_SMOOTHING) * noiseScale + NOISE_SMOOTHING * reduced;
    const threshold = departureThreshold(dof, departureZ);
    const departs = reduced > threshold;
    departingRun = departs ? departingRun + 1 : 0;
    merit = { reducedChiSquare: reduced, threshold, departs, departingRun, alertDue: departingRun === departureCount, used, iterations };
    return merit;
  }

  function estimate(timeS: number): BroadbandEstimate {
    const tau = Math.max(0, timeS - lastS);
    const u = (x[U] as number) + (x[R] as number) * tau;
    const varU = (cov[U * P + U] as number) + 2 * tau * (cov[U * P + R] as number) + tau * tau * (cov[R * P + R] as number);
    return {
      thicknessNm: u,
      sigmaNm: Math.sqrt(Math.max(0, varU)),
      physicalNm: u / (x[K] as number),
      rateNmPerS: x[R] as number,
      indexFactor: x[K] as number,
      indexSigma: indexSigma > 0 ? Math.sqrt(cov[K * P + K] as number) : 0,
      gain: x[G] as number,
      offset: x[O] as number,
      spectra,
    };
  }

  return {
    read,
    estimate,
    cutTimeS(target, delayS) {
      const r = x[R] as number;
      if (!(r > 0)) return Number.POSITIVE_INFINITY;
      return lastS + (target - (x[U] as number)) / r - delayS;
    },
    predicted(out, uNm) {
      chip.spectrum(out, uNm ?? (x[U] as number), x[K] as number, use);
      const g = x[G] as number;
      const o = x[O] as number;
      for (let i = 0; i < use.length; i++) {
        const w = use[i] as number;
        out[w] = g * (out[w] as number) + o;
      }
      return out;
    },
    use,
    wavelengthsNm: chip.wavelengthsNm,
    get merit() {
      return merit;
    },
  };
}

/** How fast the filter lets the state wander: rate (abs, nm/s per √s), gain and offset (per √s). */
export interface Wander {
  readonly rateNmPerS: number;
  readonly gain: number;
  readonly offset: number;
}

/**
 * The defaults: the rate 0.3 % of itself per √s, gain 0.2 % and offset 0.1 % per √s (a lamp and
 * detector that drift by a per cent or so over minutes; common practice, no source).
 */
export const DEFAULT_WANDER = { rate: 0.003, gain: 0.002, offset: 0.001 } as const;

/** State parameter indices of the filter (u, r, κ, g, o) and their count. */
export const STATE = { u: U, rate: R, index: K, gain: G, offset: O, size: P } as const;

/**
 * The filter's time update by Δt: x ← F x (u gains r·Δt; `x` may be null for the covariance
 * alone) and P ← F P Fᵀ + Q, F = I + Δt·e_u e_rᵀ; Q that of an integrated random walk on the rate,
 * q·[[Δt³/3, Δt²/2], [Δt²/2, Δt]] (e.g. Bar-Shalom, Li and Kirubarajan, *Estimation with
 * Applications to Tracking and Navigation*, §6.2.2), and random walks on g and o.
 */
export function carryForward(x: Float64Array | null, cov: Float64Array, dt: number, wander: Wander): void {
  if (!(dt > 0)) return;
  if (x) x[U] = (x[U] as number) + (x[R] as number) * dt;
  for (let j = 0; j < P; j++) cov[U * P + j] = (cov[U * P + j] as number) + dt * (cov[R * P + j] as number);
  for (let i = 0; i < P; i++) cov[i * P + U] = (cov[i * P + U] as number) + dt * (cov[i * P + R] as number);
  const q = wander.rateNmPerS * wander.rateNmPerS;
  cov[U * P + U] = (cov[U * P + U] as number) + (q * dt * dt * dt) / 3;
  cov[U * P + R] = (cov[U * P + R] as number) + (q * dt * dt) / 2;
  cov[R * P + U] = (cov[R * P + U] as number) + (q * dt * dt) / 2;
  cov[R * P + R] = (cov[R * P + R] as number) + q * dt;
  cov[G * P + G] = (cov[G * P + G] as number) + wander.gain * wander.gain * dt;
  cov[O * P + O] = (cov[O * P + O] as number) + wander.offset * wander.offset * dt;
}

/**
 * Adds one spectrum's information to A (5×5, state order u r κ g o): Σ w h hᵀ, h = ∂y/∂x =
 * (g·∂S/∂u, 0, g·∂S/∂κ, S, 1), w = scale/σ². With `values`, writes b = Σ w h e (e = y − g·S − o,
 * non-finite values left out) and returns χ² = Σ e²/σ² (unscaled); without, b is untouched and
 * 0 is returned (the plan's information at the truth).
 */
export function addSpectrumInformation(
  A: Float64Array,
  b: Float64Array,
  S: Float64Array,
  dU: Float64Array,
  dK: Float64Array,
  values: Float64Array | null,
  use: Int32Array,
  invVar: Float64Array,
  weightScale: number,
  g: number,
  o: number,
): number {
  let a00 = 0, a02 = 0, a03 = 0, a04 = 0, a22 = 0, a23 = 0, a24 = 0, a33 = 0, a34 = 0, a44 = 0;
  let b0 = 0, b2 = 0, b3 = 0, b4 = 0;
  let chi2 = 0;
  for (let i = 0; i < use.length; i++) {
    const w = use[i] as number;
    const s = S[w] as number;
    const iv = invVar[w] as number;
    const wt = iv * weightScale;
    let e = 0;
    if (values) {
      const y = values[w] as number;
      if (!Number.isFinite(y)) continue;
      e = y - (g * s + o);
      chi2 += e * e * iv;
    }
    const h0 = g * (dU[w] as number);
    const h2 = g * (dK[w] as number);
    a00 += wt * h0 * h0;
    a02 += wt * h0 * h2;
    a03 += wt * h0 * s;
    a04 += wt * h0;
    a22 += wt * h2 * h2;
    a23 += wt * h2 * s;
    a24 += wt * h2;
    a33 += wt * s * s;
    a34 += wt * s;
    a44 += wt;
    b0 += wt * h0 * e;
    b2 += wt * h2 * e;
    b3 += wt * s * e;
    b4 += wt * e;
  }
  addSym(A, U, U, a00); addSym(A, U, K, a02); addSym(A, U, G, a03); addSym(A, U, O, a04);
  addSym(A, K, K, a22); addSym(A, K, G, a23); addSym(A, K, O, a24);
  addSym(A, G, G, a33); addSym(A, G, O, a34); addSym(A, O, O, a44);
  if (values) {
    b[U] = b0; b[R] = 0; b[K] = b2; b[G] = b3; b[O] = b4;
  }
  return chi2;
}

function addSym(A: Float64Array, i: number, j: number, v: number): void {
  A[i * P + j] = (A[i * P + j] as number) + v;
  if (i !== j) A[j * P + i] = (A[j * P + i] as number) + v;
}
