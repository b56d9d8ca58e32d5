/**
 * The plan of a layer watched by a broadband monitor: the spectrum predicted at the target, the
 * wavelengths the fit uses, and how precisely the layer can be cut.
 *
 * Window: the instrument's grid inside the range where every medium's data are valid (the chip
 * is modelled only there), less the wavelengths where the layer's spectrum is insensitive: those
 * whose |∂S/∂u| at the target is below INSENSITIVE of the largest (each carries under 1 % of the
 * best wavelength's information on u; they would cost time and tell the fit nothing of the layer).
 *
 * Precision: the posterior Cramér–Rao bound of the broadband filter (broadband-fit.ts), i.e. its
 * covariance recursion run over the planned spectra with the Jacobians taken at the planned
 * growth (u = r·t, κ, g = 1, o = 0): for additive Gaussian noise that recursion is the bound's
 * (Tichavský, Muravchik and Nehorai, IEEE Trans. Signal Process. 46, 1386 (1998)), κ unknown with
 * its prior, the rate, gain and offset wandering as the filter lets them. It gives the rms of the
 * estimate of u at the close (the decision one shutter delay ahead, carried by the rate). The chip
 * below: a layer k below off by δ changes every spectrum by δS_k, and the linear filter answers
 * with the bias b ← b⁻ + P Hᵀ W (δS − H b⁻), b⁻ = F b (the filter is linear in its measurement
 * errors); with the layers below independent, rms σ_k, σ_below² = Σ (b_k/δ)² σ_k² (the stack
 * figure's reasoning, stack-precision.ts, over the NEAREST layers). The cut itself goes out at a
 * spectrum: the close lands within half a spectrum's growth of the instant, rms r/(f·√12).
 *
 * The spectra's Jacobians change slowly with u: they are recomputed whenever u has moved by
 * REFRESH_NM (phase change ≈ 2π·n·0.25/λ ≤ 1e-2 rad), so a layer of any length costs a few hundred
 * chip evaluations.
 */
import { buildBroadbandChip, type BroadbandChip, type BroadbandChipSpec } from '../estimate/broadband-chip.ts';
import { addSpectrumInformation, carryForward, DEFAULT_WANDER, STATE, type Wander } from '../estimate/broadband-fit.ts';
import { choleskyInto, choleskyInverseInto } from '../numeric/dense.ts';
import { scaledDispersion } from '../optics/dispersion.ts';
import { chipFaces, type ChipViewOptions } from './plan.ts';
import type { LayerRecipe, ResolvedRecipe } from './recipe.ts';
import { NEAREST } from './stack-precision.ts';

const INSENSITIVE = 0.1;
const REFRESH_NM = 0.25;
/** Fewer sensitive wavelengths than this and the whole modelled grid is used. */
const MIN_WINDOW = 16;
/** Thickening of a layer below for its sensitivity, nm (small enough to stay linear, large enough to stay clear of rounding). */
const BELOW_DELTA_NM = 0.05;

export interface BroadbandPlanInput {
  /** The chip below (layers as planned or as the refits know them) and the growing layer. */
  chip: BroadbandChipSpec;
  /** The instrument's grid, nm. */
  wavelengthsNm: ArrayLike<number>;
  /** The layer's chip target u, nm, and its chip rate, nm/s. */
  targetNm: number;
  rateNmPerS: number;
  /** Spectra per second. */
  sampleRateHz: number;
  shutterDelayS: number;
  /** rms of one value per wavelength (fraction). */
  noise: number;
  /** Priors as the filter takes them (broadband-fit.ts). */
  rateSigmaFraction: number;
  indexSigma: number;
  gainSigma: number;
  offsetSigma: number;
  startSigmaNm?: number;
  /** Fractions per √s as the filter's options (defaults DEFAULT_WANDER). */
  rateWander?: number;
  gainDrift?: number;
  offsetDrift?: number;
  /** rms of each finished layer's chip thickness, deposition order (absent: the chip below is exact). */
  belowSigmaNm?: readonly number[];
}

export interface BroadbandLayerPlan {
  /** The used grid indices, and the span they cover, nm. */
  window: { use: Int32Array; fromNm: number; toNm: number; count: number; excludedInsensitive: number };
  /** The predicted spectrum (fraction) at the target over the whole grid; NaN where the chip is not modelled. */
  predicted: Float64Array;
  /** Spectra the layer takes up to the cut. */
  spectra: number;
  /** rms of the estimate of u at the close, from noise with κ unknown (the filter's bound), chip nm. */
  boundNm: number;
  /** What the uncertain layers below add, chip nm. */
  belowNm: number;
  /** The close within half a spectrum of its instant, rms, chip nm. */
  timingNm: number;
  /** √(bound² + below² + timing²): the rms of the layer as cut, chip nm. */
  cutPrecisionNm: number;
  /** The bound on κ after the layer. */
  indexSigma: number;
}

export function planBroadbandLayer(input: BroadbandPlanInput): BroadbandLayerPlan {
  const { targetNm, rateNmPerS, sampleRateHz, noise } = input;
  if (!(targetNm > 0 && rateNmPerS > 0 && sampleRateHz > 0 && noise > 0)) {
    throw new RangeError('broadband plan: target, rate, sample rate and noise must be positive');
  }
  const chip = buildBroadbandChip(input.chip, input.wavelengthsNm);
  const nW = chip.wavelengthsNm.length;
  const predicted = new Float64Array(nW);
  chip.spectrum(predicted, targetNm, 1);
  const window = chooseWindow(chip, targetNm);
  const { use } = window;
  const invVar = new Float64Array(nW).fill(1 / (noise * noise));

  const P = STATE.size;
  const wander: Wander = {
    rateNmPerS: (input.rateWander ?? DEFAULT_WANDER.rate) * rateNmPerS,
    gain: input.gainDrift ?? DEFAULT_WANDER.gain,
    offset: input.offsetDrift ?? DEFAULT_WANDER.offset,
  };
  const cov = new Float64Array(P * P);
  cov[STATE.u * P + STATE.u] = (input.startSigmaNm ?? 0.5) ** 2;
  cov[STATE.rate * P + STATE.rate] = (input.rateSigmaFraction * rateNmPerS) ** 2;
  cov[STATE.index * P + STATE.index] = input.indexSigma > 0 ? input.indexSigma ** 2 : 1e-18;
  cov[STATE.gain * P + STATE.gain] = input.gainSigma ** 2;
  cov[STATE.offset * P + STATE.offset] = input.offsetSigma ** 2;

  // The layers below whose error is carried: the nearest NEAREST with a stated σ.
  const sigmas = input.belowSigmaNm ?? [];
  const belowCount = input.chip.below.length;
  const perturbed: { chip: BroadbandChip; sigmaNm: number; bias: Float64Array; dS: Float64Array }[] = [];
  for (let k = Math.max(0, belowCount - NEAREST); k < belowCount; k++) {
    const sigmaNm = sigmas[k] ?? 0;
    if (!(sigmaNm > 0)) continue;
    const below = input.chip.below.map((l, j) => (j === k ? { ...l, thicknessNm: l.thicknessNm + BELOW_DELTA_NM } : l));
    perturbed.push({ chip: buildBroadbandChip({ ...input.chip, below }, input.wavelengthsNm), sigmaNm, bias: new Float64Array(P), dS: new Float64Array(nW) });
  }

  const dt = 1 / sampleRateHz;
  // The decision goes out at the last spectrum before the target less the delay's growth.
  const decisionS = targetNm / rateNmPerS - input.shutterDelayS;
  const spectra = Math.max(1, Math.floor(decisionS / dt));
  const S = new Float64Array(nW);
  const dU = new Float64Array(nW);
  const dK = new Float64Array(nW);
  const scratchS = new Float64Array(nW);
  const A = new Float64Array(P * P);
  const L = new Float64Array(P * P);
  const column = new Float64Array(P);
  const unusedB = new Float64Array(P);
  // One spectrum's information, the same until the Jacobians are refreshed.
  const spectrumInfo = new Float64Array(P * P);
  const hb = new Float64Array(P);
  let refreshedAt = Number.NEGATIVE_INFINITY;
  for (let j = 1; j <= spectra; j++) {
    const u = rateNmPerS * j * dt;
    if (Math.abs(u - refreshedAt) >= REFRESH_NM) {
      chip.spectrumAndSlopes(S, dU, dK, u, 1, use);
      spectrumInfo.fill(0);
      addSpectrumInformation(spectrumInfo, unusedB, S, dU, dK, null, use, invVar, 1, 1, 0);
      for (const p of perturbed) {
        p.chip.spectrum(scratchS, u, 1, use);
        for (const w of use) p.dS[w] = (scratchS[w] as number) - (S[w] as number);
      }
      refreshedAt = u;
    }
    carryForward(null, cov, dt, wander);
    for (const p of perturbed) carryForward(p.bias, zeroCov, dt, noWander);
    // Information update: P ← (P⁻¹ + Σ w h hᵀ)⁻¹.
    if (!choleskyInto(L, cov, P)) break;
    choleskyInverseInto(A, L, P, column);
    for (let k = 0; k < P * P; k++) A[k] = (A[k] as number) + (spectrumInfo[k] as number);
    if (!choleskyInto(L, A, P)) break;
    choleskyInverseInto(cov, L, P, column);
    for (const p of perturbed) {
      // b ← b + P Hᵀ W (δS − H b): Hb per wavelength is h·b.
      hb.fill(0);
      const b = p.bias;
      for (const w of use) {
        const h0 = dU[w] as number;
        const h2 = dK[w] as number;
        const s = S[w] as number;
        const e = ((p.dS[w] as number) - (h0 * (b[STATE.u] as number) + h2 * (b[STATE.index] as number) + s * (b[STATE.gain] as number) + (b[STATE.offset] as number))) * (invVar[w] as number);
        hb[STATE.u] = (hb[STATE.u] as number) + h0 * e;
        hb[STATE.index] = (hb[STATE.index] as number) + h2 * e;
        hb[STATE.gain] = (hb[STATE.gain] as number) + s * e;
        hb[STATE.offset] = (hb[STATE.offset] as number) + e;
      }
      for (let r = 0; r < P; r++) {
        let sum = 0;
        for (let c = 0; c < P; c++) sum += (cov[r * P + c] as number) * (hb[c] as number);
        b[r] = (b[r] as number) + sum;
      }
    }
  }
  // Carried from the decision to the close: τ = the time to the target from the last spectrum.
  const tau = targetNm / rateNmPerS - spectra * dt;
  const u0 = STATE.u * P;
  const varClose = (cov[u0 + STATE.u] as number) + 2 * tau * (cov[u0 + STATE.rate] as number) + tau * tau * (cov[STATE.rate * P + STATE.rate] as number);
  let belowVar = 0;
  for (const p of perturbed) {
    const biasClose = (p.bias[STATE.u] as number) + tau * (p.bias[STATE.rate] as number);
    belowVar += ((biasClose / BELOW_DELTA_NM) * p.sigmaNm) ** 2;
  }
  const boundNm = Math.sqrt(Math.max(0, varClose));
  const belowNm = Math.sqrt(belowVar);
  const timingNm = rateNmPerS / (sampleRateHz * Math.sqrt(12));
  return {
    window,
    predicted,
    spectra,
    boundNm,
    belowNm,
    timingNm,
    cutPrecisionNm: Math.hypot(boundNm, belowNm, timingNm),
    indexSigma: input.indexSigma > 0 ? Math.sqrt(cov[STATE.index * P + STATE.index] as number) : 0,
  };
}

/** A bias is carried like the state: u gains r·Δt; nothing is added to it. */
const zeroCov = new Float64Array(STATE.size * STATE.size);
const noWander: Wander = { rateNmPerS: 0, gain: 0, offset: 0 };

/** The modelled grid less the insensitive wavelengths (see the file's comment). */
export function chooseWindow(chip: BroadbandChip, targetNm: number): BroadbandLayerPlan['window'] {
  const nW = chip.wavelengthsNm.length;
  const S = new Float64Array(nW);
  const dU = new Float64Array(nW);
  const dK = new Float64Array(nW);
  // The sensitivity over the layer's last part, where the information that sets the cut lies.
  const slope = new Float64Array(nW);
  for (const fraction of [0.5, 0.75, 1]) {
    chip.spectrumAndSlopes(S, dU, dK, fraction * targetNm, 1, chip.modelled);
    for (const w of chip.modelled) slope[w] = Math.max(slope[w] as number, Math.abs(dU[w] as number));
  }
  let largest = 0;
  for (const w of chip.modelled) largest = Math.max(largest, slope[w] as number);
  let use: Int32Array = Int32Array.from(Array.from(chip.modelled).filter((w) => (slope[w] as number) >= INSENSITIVE * largest));
  if (use.length < MIN_WINDOW) use = chip.modelled;
  return {
    use,
    fromNm: chip.wavelengthsNm[use[0] as number] as number,
    toNm: chip.wavelengthsNm[use[use.length - 1] as number] as number,
    count: use.length,
    excludedInsensitive: chip.modelled.length - use.length,
  };
}

/**
 * The broadband view of layer `index` (0-based) of a recipe on its chip, as `chipMonitorFor` gives
 * the single-wavelength one: the finished layers of its chip at part thicknesses `partNm` (the
 * design's where absent) times their chip ratio, with their index factors, the layer's material
 * growing; valid where the substrate's and every layer's data are.
 */
export function broadbandChipFor(recipe: ResolvedRecipe, index: number, partNm: readonly number[], view: ChipViewOptions = {}): BroadbandChipSpec {
  const layer = recipe.layers[index] as LayerRecipe;
  const chip = recipe.chips[layer.chip] as ResolvedRecipe['chips'][number];
  const factors = view.indexFactors ?? [];
  let lo = Math.max(chip.validRangeNm[0], layer.validRangeNm[0]);
  let hi = Math.min(chip.validRangeNm[1], layer.validRangeNm[1]);
  const below = [];
  for (let j = chip.fromLayer - 1; j < index; j++) {
    const l = recipe.layers[j] as LayerRecipe;
    below.push({ dispersion: scaledDispersion(l.dispersion, factors[j] ?? 1, 0), thicknessNm: (partNm[j] ?? l.targetNm) * l.chipRatio });
    lo = Math.max(lo, l.validRangeNm[0]);
    hi = Math.min(hi, l.validRangeNm[1]);
  }
  return {
    ...chipFaces(recipe, layer),
    below,
    growing: scaledDispersion(layer.dispersion, view.growingIndexFactor ?? 1, 0),
    angleDeg: layer.angleDeg,
    signal: layer.signal,
    validRangeNm: [lo, hi],
  };
}
