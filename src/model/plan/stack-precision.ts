/**
 * How much of a layer's cut error comes from the layers below it. The fit of a layer's signal
 * assumes the chip below it as estimated; a layer k below that is off by δd_k changes the curve
 * by δS = (∂S/∂d_k)·δd_k, and the least-squares fit answers with the bias
 *   δθ = (J + Π)⁻¹ Σ w v δS / σ²,   v = ∂y/∂θ, θ = (d_cut, r, g, o)
 * (the bias of a least-squares estimate under a model error; e.g. Kay, *Fundamentals of
 * Statistical Signal Processing: Estimation Theory*, ch. 8; from memory). With the layers below
 * uncertain by σ_k, independently, the cut inherits
 *   σ_below² = Σ_k (∂d_cut/∂d_k)² σ_k².
 * A steep curve is what makes a layer's noise bound small, and it is also what makes the layer
 * sensitive to the chip below it: for such layers σ_below is the larger part.
 *
 * Work: the curve and its derivatives on a coarse grid (COARSE_STEPS steps to the cut; the
 * information sums converge long before), one chip monitor per layer below, the nearest
 * NEAREST of them (farther layers move the curve less and the refit pins them from above).
 */
import type { ChipMonitor } from './chip-monitor.ts';
import type { FitPriors } from './precision.ts';

/** Grid steps from the start of the layer to its cut. */
const COARSE_STEPS = 96;
/** Layers below counted. */
export const NEAREST = 6;

export interface BelowLayer {
  /** The chip monitor of the growing layer with this layer below `deltaNm` (chip nm) thicker. */
  monitor: ChipMonitor;
  deltaNm: number;
  /** rms uncertainty of this layer's chip thickness, nm. */
  sigmaNm: number;
}

/**
 * σ_below of a layer cut at chip thickness `targetNm` after growing from 0 at `rateNmPerS` chip
 * nm/s; `monitor` its chip as planned, `below` the perturbed views. Chip nm.
 */
export function belowStackPrecisionNm(
  monitor: ChipMonitor,
  below: readonly BelowLayer[],
  targetNm: number,
  rateNmPerS: number,
  sampleRateHz: number,
  noise: number,
  priors: FitPriors,
): number {
  const n = COARSE_STEPS + 1;
  const h = targetNm / COARSE_STEPS;
  const base = new Float64Array(n);
  for (let i = 0; i < n; i++) base[i] = monitor.signalAt(i * h);
  // Information J (4×4) of θ = (d_cut, r, g, o), as precision.ts builds it, and the first
  // column x of (J + Π)⁻¹: then ∂d_cut/∂d_k = xᵀ Σ w v δS_k / σ².
  const readingsPerNm = sampleRateHz / rateNmPerS;
  const V = new Float64Array(4 * n);
  const W = new Float64Array(n);
  const J = new Float64Array(16);
  for (let i = 0; i < n; i++) {
    const prev = base[i === 0 ? 0 : i - 1] as number;
    const next = base[i === n - 1 ? i : i + 1] as number;
    const slope = (next - prev) / (i === 0 || i === n - 1 ? h : 2 * h);
    const w = ((i === 0 || i === n - 1 ? 0.5 : 1) * h * readingsPerNm) / (noise * noise);
    const v = [slope, (slope * (i * h - targetNm)) / rateNmPerS, base[i] as number, 1];
    W[i] = w;
    for (let a = 0; a < 4; a++) {
      V[a * n + i] = v[a] as number;
      for (let b = 0; b < 4; b++) J[a * 4 + b] = (J[a * 4 + b] as number) + w * (v[a] as number) * (v[b] as number);
    }
  }
  J[5] = (J[5] as number) + 1 / (priors.rateSigmaFraction * rateNmPerS) ** 2;
  J[10] = (J[10] as number) + 1 / priors.gainSigma ** 2;
  J[15] = (J[15] as number) + 1 / priors.offsetSigma ** 2;
  const x = firstColumnOfInverse(J);
  if (!x) return Number.NaN;
  let variance = 0;
  for (const layer of below) {
    let bias = 0;
    for (let a = 0; a < 4; a++) {
      let sum = 0;
      for (let i = 0; i < n; i++) sum += (W[i] as number) * (V[a * n + i] as number) * (layer.monitor.signalAt(i * h) - (base[i] as number));
      bias += (x[a] as number) * sum;
    }
    const perNm = bias / layer.deltaNm;
    variance += (perNm * layer.sigmaNm) ** 2;
  }
  return Math.sqrt(variance);
}

/** The first column of the inverse of a symmetric positive-definite 4×4 matrix (Gauss–Jordan), or null. */
function firstColumnOfInverse(J: Float64Array): Float64Array | null {
  const a = Float64Array.from(J);
  const b = Float64Array.of(1, 0, 0, 0);
  for (let c = 0; c < 4; c++) {
    const pivot = a[c * 4 + c] as number;
    if (!(Math.abs(pivot) > 0)) return null;
    for (let r = 0; r < 4; r++) {
      if (r === c) continue;
      const f = (a[r * 4 + c] as number) / pivot;
      if (f === 0) continue;
      for (let k = 0; k < 4; k++) a[r * 4 + k] = (a[r * 4 + k] as number) - f * (a[c * 4 + k] as number);
      b[r] = (b[r] as number) - f * (b[c] as number);
    }
  }
  for (let r = 0; r < 4; r++) b[r] = (b[r] as number) / (a[r * 4 + r] as number);
  return b;
}
