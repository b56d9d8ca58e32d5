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
 * sensitive to the chip below it: for such layers σ_below is the larger part. The bound itself is
 * taken here with the layer's index among the unknowns, as the estimator fits it (the plan's
 * precisionNm leaves it out): its prior is the design's few per cent for a material's first
 * layer, then what the material's earlier layers left (plus INDEX_RUN_SIGMA).
 *
 * Work: the curve and its derivatives on a coarse grid (COARSE_STEPS steps to the cut; the
 * information sums converge long before), one chip monitor per layer below, the nearest
 * NEAREST of them (farther layers move the curve less and the refit pins them from above).
 */
import { inverse } from '../numeric/dense.ts';
import type { ChipMonitor } from './chip-monitor.ts';
import type { FitPriors } from './precision.ts';

/** Grid steps from the start of the layer to its cut. */
const COARSE_STEPS = 96;
/** Layers below counted. */
export const NEAREST = 6;

/**
 * How far a material's index may move between its layers in one run, rms: the fit of a layer
 * starts from what the material's earlier layers showed, this much wider (a film's index holds
 * within a run far better than from run to run; common practice, no source).
 */
export const INDEX_RUN_SIGMA = 0.002;
/** The design's index is trusted to this rms before any layer of the material (a few per cent; common practice, no source). */
export const DEFAULT_INDEX_SIGMA = 0.03;

export interface BelowLayer {
  /** The chip monitor of the growing layer with this layer below `deltaNm` (chip nm) thicker. */
  monitor: ChipMonitor;
  deltaNm: number;
  /** rms uncertainty of this layer's chip thickness, nm. */
  sigmaNm: number;
}

export interface IndexView {
  /** The growing layer at n·(1 ± delta). */
  plus: ChipMonitor;
  minus: ChipMonitor;
  delta: number;
  /** Prior rms of the layer's index factor κ. */
  sigma: number;
}

export interface LayerPrecision {
  /** The bound on the chip thickness at the cut with κ among the unknowns, nm. */
  cutNm: number;
  /** What the layers below bring, nm. */
  belowNm: number;
  /** The bound on κ after the layer: the prior of the material's next layer. */
  indexSigma: number;
}

/**
 * The fit's bound at the cut of a layer cut at chip thickness `targetNm` after growing from 0 at
 * `rateNmPerS` chip nm/s, with θ = (d_cut, r, g, o, κ) as the estimator fits it (κ the index,
 * F(u, κ) at a fixed optical thickness, from `index`), and the bias the layers below bring.
 * `monitor` is its chip as planned, `below` the perturbed views. Chip nm.
 */
export function layerPrecision(
  monitor: ChipMonitor,
  index: IndexView,
  below: readonly BelowLayer[],
  targetNm: number,
  rateNmPerS: number,
  sampleRateHz: number,
  noise: number,
  priors: FitPriors,
): LayerPrecision {
  const P = 5;
  const n = COARSE_STEPS + 1;
  const h = targetNm / COARSE_STEPS;
  const base = new Float64Array(n);
  const dIndex = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const u = i * h;
    base[i] = monitor.signalAt(u);
    dIndex[i] = (index.plus.signalAt(u / (1 + index.delta)) - index.minus.signalAt(u / (1 - index.delta))) / (2 * index.delta);
  }
  // Information of θ over the readings (trapezoid, readings uniform in time), plus the priors.
  const readingsPerNm = sampleRateHz / rateNmPerS;
  const V = new Float64Array(P * n);
  const W = new Float64Array(n);
  const J = new Float64Array(P * P);
  for (let i = 0; i < n; i++) {
    const prev = base[i === 0 ? 0 : i - 1] as number;
    const next = base[i === n - 1 ? i : i + 1] as number;
    const slope = (next - prev) / (i === 0 || i === n - 1 ? h : 2 * h);
    const w = ((i === 0 || i === n - 1 ? 0.5 : 1) * h * readingsPerNm) / (noise * noise);
    const v = [slope, (slope * (i * h - targetNm)) / rateNmPerS, base[i] as number, 1, dIndex[i] as number];
    W[i] = w;
    for (let a = 0; a < P; a++) {
      V[a * n + i] = v[a] as number;
      for (let b = 0; b < P; b++) J[a * P + b] = (J[a * P + b] as number) + w * (v[a] as number) * (v[b] as number);
    }
  }
  J[1 * P + 1] = (J[1 * P + 1] as number) + 1 / (priors.rateSigmaFraction * rateNmPerS) ** 2;
  J[2 * P + 2] = (J[2 * P + 2] as number) + 1 / priors.gainSigma ** 2;
  J[3 * P + 3] = (J[3 * P + 3] as number) + 1 / priors.offsetSigma ** 2;
  J[4 * P + 4] = (J[4 * P + 4] as number) + 1 / index.sigma ** 2;
  const cov = inverse(J, P);
  const x = Float64Array.from({ length: P }, (_, a) => cov[a] as number); // first column (symmetric)
  let variance = 0;
  for (const layer of below) {
    let bias = 0;
    for (let a = 0; a < P; a++) {
      let sum = 0;
      for (let i = 0; i < n; i++) sum += (W[i] as number) * (V[a * n + i] as number) * (layer.monitor.signalAt(i * h) - (base[i] as number));
      bias += (x[a] as number) * sum;
    }
    variance += ((bias / layer.deltaNm) * layer.sigmaNm) ** 2;
  }
  const c00 = cov[0] as number;
  const c44 = cov[P * P - 1] as number;
  return { cutNm: c00 > 0 ? Math.sqrt(c00) : Number.NaN, belowNm: Math.sqrt(variance), indexSigma: c44 > 0 ? Math.sqrt(c44) : index.sigma };
}
