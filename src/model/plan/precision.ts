/**
 * How precisely a layer can be cut: the Cramér–Rao bound of the model fit that the optical
 * estimator performs, and the precision of the plain rules for comparison.
 *
 * Measurement model (ESTIMATION.md): y(t) = g·S(d(t)) + o + ε, d(t) = d_cut + r·(t − t_cut),
 * ε white Gaussian with rms σ, readings uniform in time at the sample rate from the start of
 * the layer to the cut, the rate r constant through the layer. Unknowns θ = (d_cut, r, g, o)
 * with g = 1, o = 0 nominal. The Fisher information J = Σ (∂y/∂θ)(∂y/∂θ)ᵀ / σ² plus the prior
 * information on r, g and o (a crystal rate, a calibrated monitor); the bound on d_cut is
 * √(J⁻¹)₁₁ (Cramér 1946, Rao 1945; e.g. Kay, *Fundamentals of Statistical Signal Processing:
 * Estimation Theory*, ch. 3). Assumptions that make it optimistic: the index of the layer and
 * the earlier layers are exact, the rate does not wander, the noise is white.
 */

export interface FitPriors {
  /** rms prior uncertainty of the monitor gain (fraction of 1). */
  gainSigma: number;
  /** rms prior uncertainty of the monitor offset (fraction of full scale). */
  offsetSigma: number;
  /** rms prior uncertainty of the rate, as a fraction of the rate (from the crystal). */
  rateSigmaFraction: number;
}

/** Priors after a routine calibration; common practice, no source. */
export const DEFAULT_PRIORS: FitPriors = { gainSigma: 0.01, offsetSigma: 0.005, rateSigmaFraction: 0.05 };

/**
 * The bound on the chip thickness at the cut (nm), from the signal sampled at `i · stepNm`
 * for i = 0 … n−1 up to the cut at `(n−1)·stepNm` (trapezoidal sum over the readings, whose
 * density is sampleRate / rate per nm; slopes by central differences of the samples).
 * `scratch` needs 16 doubles.
 */
export function fitPrecisionBound(
  samples: ArrayLike<number>,
  count: number,
  stepNm: number,
  rateNmPerS: number,
  sampleRateHz: number,
  noise: number,
  priors: FitPriors,
  scratch: Float64Array = new Float64Array(16),
): number {
  if (count < 3) return Number.POSITIVE_INFINITY;
  const cut = (count - 1) * stepNm;
  const readingsPerNm = sampleRateHz / rateNmPerS;
  const J = scratch.fill(0);
  for (let i = 0; i < count; i++) {
    const s = samples[i] as number;
    const prev = samples[i === 0 ? 0 : i - 1] as number;
    const next = samples[i === count - 1 ? i : i + 1] as number;
    const span = i === 0 || i === count - 1 ? stepNm : 2 * stepNm;
    const slope = (next - prev) / span;
    const weight = (i === 0 || i === count - 1 ? 0.5 : 1) * stepNm * readingsPerNm;
    // ∂y/∂θ for θ = (d_cut, r, g, o) at g = 1: (S', S'·(t − t_cut), S, 1), t − t_cut = (d − d_cut)/r
    const v0 = slope;
    const v1 = (slope * (i * stepNm - cut)) / rateNmPerS;
    const v2 = s;
    const v3 = 1;
    accumulate(J, weight, v0, v1, v2, v3);
  }
  const inv2 = 1 / (noise * noise);
  for (let k = 0; k < 16; k++) J[k] = (J[k] as number) * inv2;
  J[5] = (J[5] as number) + 1 / (priors.rateSigmaFraction * rateNmPerS) ** 2;
  J[10] = (J[10] as number) + 1 / priors.gainSigma ** 2;
  J[15] = (J[15] as number) + 1 / priors.offsetSigma ** 2;
  const variance = firstDiagonalOfInverse(J);
  return variance > 0 ? Math.sqrt(variance) : Number.POSITIVE_INFINITY;
}

/** J += w·v vᵀ for v = (a, b, c, d), row-major 4×4. */
function accumulate(J: Float64Array, w: number, a: number, b: number, c: number, d: number): void {
  for (let r = 0; r < 4; r++) {
    const wr = w * (r === 0 ? a : r === 1 ? b : r === 2 ? c : d);
    J[r * 4] = (J[r * 4] as number) + wr * a;
    J[r * 4 + 1] = (J[r * 4 + 1] as number) + wr * b;
    J[r * 4 + 2] = (J[r * 4 + 2] as number) + wr * c;
    J[r * 4 + 3] = (J[r * 4 + 3] as number) + wr * d;
  }
}

/**
 * (J⁻¹)₁₁ of a symmetric positive-definite 4×4 matrix by Cholesky factorisation; NaN when J is
 * not positive definite (the parameters cannot be told apart).
 */
export function firstDiagonalOfInverse(J: Float64Array): number {
  // (J⁻¹)₁₁ = 1 / (J₁₁ − b ᵀ C⁻¹ b) with C the lower-right 3×3 block (Schur complement).
  const L = new Float64Array(9);
  for (let i = 0; i < 3; i++) {
    for (let j = 0; j <= i; j++) {
      let sum = J[(i + 1) * 4 + (j + 1)] as number;
      for (let k = 0; k < j; k++) sum -= (L[i * 3 + k] as number) * (L[j * 3 + k] as number);
      if (i === j) {
        if (!(sum > 0)) return Number.NaN;
        L[i * 3 + i] = Math.sqrt(sum);
      } else {
        L[i * 3 + j] = sum / (L[j * 3 + j] as number);
      }
    }
  }
  // Solve L z = b, then bᵀC⁻¹b = |z|².
  let quad = 0;
  const z = [0, 0, 0];
  for (let i = 0; i < 3; i++) {
    let sum = J[i + 1] as number;
    for (let k = 0; k < i; k++) sum -= (L[i * 3 + k] as number) * (z[k] as number);
    z[i] = sum / (L[i * 3 + i] as number);
    quad += (z[i] as number) ** 2;
  }
  const schur = (J[0] as number) - quad;
  return schur > 0 ? 1 / schur : Number.NaN;
}

/** A level cut by a plain crossing rule from one reading: σ_d = σ / |dS/dd| (physics-notes). */
export function levelRulePrecision(noise: number, slopePerNm: number): number {
  return noise / Math.abs(slopePerNm);
}

/**
 * A turning point declared when the signal has come back by k·σ from its extremum:
 * |Δd| ≈ √(2kσ / |S''|) (physics-notes, derived from S ≈ S_tp + ½S''Δd²), here with k = 1.
 */
export function turningPointRulePrecision(noise: number, curvaturePerNm2: number, k = 1): number {
  return Math.sqrt((2 * k * noise) / Math.abs(curvaturePerNm2));
}
