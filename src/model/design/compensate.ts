/**
 * Compensation: after a layer, re-optimise the thicknesses of the layers still to come, within
 * bounds, so that the finished stack's spectrum over the design band stays as close as possible
 * to the design's (least squares over the band, optionally weighted), the layers already
 * deposited held at their estimated thicknesses. Levenberg–Marquardt with box bounds on a
 * forward-difference Jacobian (Marquardt, J. SIAM 11, 431 (1963); Press et al., *Numerical
 * Recipes*, §15.5; from memory). Pure; the optical model is built once per call.
 */
import { buildOpticalModel, spectrum, type StackSpec } from '../optics/optical-model.ts';
import { solveDamped } from '../numeric/dense.ts';

export interface CompensationOptions {
  /** The band, nm, and its sampling step (default 5 nm). */
  fromNm: number;
  toNm: number;
  stepNm?: number;
  quantity: 'R' | 'T';
  /** Free layers stay within ±this fraction of their design thickness (default 0.1). */
  boundsFraction?: number;
  /** Weight of each grid wavelength (default 1). */
  weight?: (wavelengthNm: number) => number;
  maxIterations?: number;
  /**
   * The stack as the chamber deposits it, when its media are not the design's (the indices the
   * fits estimated): the spectrum is computed with these media, the target stays the design's,
   * and the thicknesses are physical ones in these media. Default: the design's media.
   */
  deposited?: StackSpec;
}

export interface CompensationResult {
  /** Every layer's thickness, deposition order: fixed ones as given, free ones re-optimised. */
  thicknessNm: Float64Array;
  /** Root-mean-square weighted deviation from the design over the band, before and after. */
  rmsBefore: number;
  rmsAfter: number;
  iterations: number;
}

/**
 * `design` gives the media and the design thicknesses (the target spectrum and the bounds);
 * `current` the thicknesses to start from (estimates for the first `fixed` layers, the plan for
 * the rest). Layers `fixed` … end are free.
 */
export function compensate(design: StackSpec, current: ArrayLike<number>, fixed: number, options: CompensationOptions): CompensationResult {
  const step = options.stepNm ?? 5;
  const count = Math.floor((options.toNm - options.fromNm) / step + 1e-9) + 1;
  const grid = Float64Array.from({ length: count }, (_, i) => options.fromNm + i * step);
  const targetModel = buildOpticalModel(design, grid, 0);
  const model = options.deposited ? buildOpticalModel(options.deposited, grid, 0) : targetModel;
  if (model.thicknessNm.length !== targetModel.thicknessNm.length) throw new RangeError('compensation: the deposited stack must have the design\'s layers');
  const weights = Float64Array.from(grid, (w) => Math.sqrt(options.weight?.(w) ?? 1));
  const out = { R: new Float64Array(count), T: new Float64Array(count), A: new Float64Array(count) };
  const pick = (): Float64Array => (options.quantity === 'R' ? out.R : out.T);
  spectrum(out, targetModel, 'mean');
  const target = Float64Array.from(pick());

  const n = model.thicknessNm.length;
  const free = Math.max(0, n - fixed);
  const x = Float64Array.from(current);
  const bounds = options.boundsFraction ?? 0.1;
  const lo = Float64Array.from(targetModel.thicknessNm, (d) => d * (1 - bounds));
  const hi = Float64Array.from(targetModel.thicknessNm, (d) => d * (1 + bounds));

  const residuals = (thickness: Float64Array, into: Float64Array): number => {
    spectrum(out, model, 'mean', thickness);
    const s = pick();
    let sum = 0;
    for (let i = 0; i < count; i++) {
      const r = (weights[i] as number) * ((s[i] as number) - (target[i] as number));
      into[i] = r;
      sum += r * r;
    }
    return sum;
  };
  const r = new Float64Array(count);
  let cost = residuals(x, r);
  const rmsBefore = Math.sqrt(cost / count);
  if (free === 0) return { thicknessNm: x, rmsBefore, rmsAfter: rmsBefore, iterations: 0 };

  const J = new Float64Array(count * free);
  const rTrial = new Float64Array(count);
  const trial = new Float64Array(n);
  const A = new Float64Array(free * free);
  const g = new Float64Array(free);
  let lambda = 1e-3;
  let iterations = 0;
  const maxIterations = options.maxIterations ?? 15;
  for (; iterations < maxIterations; iterations++) {
    // Forward differences, 0.05 nm: far above rounding, far below any fringe.
    for (let j = 0; j < free; j++) {
      trial.set(x);
      const k = fixed + j;
      const h = 0.05;
      trial[k] = (x[k] as number) + h;
      residuals(trial, rTrial);
      for (let i = 0; i < count; i++) J[i * free + j] = ((rTrial[i] as number) - (r[i] as number)) / h;
    }
    // Normal equations JᵀJ δ = −Jᵀr, damped.
    A.fill(0);
    g.fill(0);
    for (let i = 0; i < count; i++) {
      const ri = r[i] as number;
      for (let a = 0; a < free; a++) {
        const ja = J[i * free + a] as number;
        g[a] = (g[a] as number) - ja * ri;
        for (let b = 0; b <= a; b++) A[a * free + b] = (A[a * free + b] as number) + ja * (J[i * free + b] as number);
      }
    }
    let improved = false;
    for (let attempt = 0; attempt < 8 && !improved; attempt++) {
      const delta = solveDamped(A, g, free, lambda);
      trial.set(x);
      for (let j = 0; j < free; j++) {
        const k = fixed + j;
        trial[k] = Math.min(hi[k] as number, Math.max(lo[k] as number, (x[k] as number) + (delta[j] as number)));
      }
      const trialCost = residuals(trial, rTrial);
      if (trialCost < cost) {
        x.set(trial);
        r.set(rTrial);
        const gain = cost - trialCost;
        cost = trialCost;
        lambda = Math.max(1e-9, lambda / 3);
        improved = true;
        if (gain < 1e-12 * (1 + cost)) iterations = maxIterations;
      } else lambda *= 10;
    }
    if (!improved) break;
  }
  return { thicknessNm: x, rmsBefore, rmsAfter: Math.sqrt(cost / count), iterations };
}
