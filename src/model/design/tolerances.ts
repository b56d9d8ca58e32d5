/**
 * Tolerances: what the customer's specification asks of a coating's spectrum — over a
 * wavelength range, T or R at least and/or at most some percentage, at an angle and
 * polarisation — and the verdict on a stack: pass or fail, with the worst margin.
 *
 * A margin is in percentage points, positive inside the tolerance: for "at least 98 %" a
 * spectrum at 98.6 % has +0.6 pp, at 97.9 % −0.1 pp. The worst margin of a tolerance is the
 * smallest over its wavelengths and bounds; a stack meets the tolerance when it is ≥ 0.
 */
import { z } from 'zod';
import { buildOpticalModel, spectrum, type StackSpec } from '../optics/optical-model.ts';

const percent = z.number().finite().min(0).max(100);

export const ToleranceSchema = z
  .strictObject({
    fromNm: z.number().finite().positive(),
    toNm: z.number().finite().positive(),
    quantity: z.enum(['T', 'R']),
    atLeastPercent: percent.optional(),
    atMostPercent: percent.optional(),
    /** Angle of incidence in the incident medium, degrees (default 0). */
    angleDeg: z.number().finite().min(0).max(89).default(0),
    /** Polarisation (default mean: unpolarised light). */
    pol: z.enum(['s', 'p', 'mean']).default('mean'),
    /**
     * `part` (default): the whole part as the design describes it, back face included;
     * `front`: the coated face alone (light entering the substrate), as a specification per
     * coated surface is written.
     */
    face: z.enum(['part', 'front']).default('part'),
  })
  .refine((t) => t.fromNm <= t.toNm, { message: 'fromNm must not lie above toNm', path: ['toNm'] })
  .refine((t) => t.atLeastPercent !== undefined || t.atMostPercent !== undefined, {
    message: 'a tolerance needs atLeastPercent, atMostPercent or both',
  })
  .refine((t) => t.atLeastPercent === undefined || t.atMostPercent === undefined || t.atLeastPercent <= t.atMostPercent, {
    message: 'atLeastPercent must not lie above atMostPercent: no spectrum could meet it',
    path: ['atMostPercent'],
  });

export type Tolerance = z.output<typeof ToleranceSchema>;

/** The verdict on one tolerance. */
export interface ToleranceResult {
  /** Smallest margin over the tolerance's wavelengths and bounds, percentage points. */
  worstMarginPp: number;
  /** Where the worst margin lies, nm. */
  worstAtNm: number;
  /** The spectrum's value there, %. */
  valuePercent: number;
  pass: boolean;
}

export interface ToleranceVerdict {
  results: ToleranceResult[];
  pass: boolean;
  /** The smallest of the results' worst margins, pp (+∞ when there are no tolerances). */
  worstMarginPp: number;
}

/** Evaluation grid: 1 nm steps (or finer, at least 2 points) over the range, both ends included. */
export const TOLERANCE_STEP_NM = 1;

export function toleranceGrid(t: Pick<Tolerance, 'fromNm' | 'toNm'>): Float64Array {
  if (t.toNm === t.fromNm) return Float64Array.of(t.fromNm);
  const count = Math.max(2, Math.ceil((t.toNm - t.fromNm) / TOLERANCE_STEP_NM - 1e-9) + 1);
  return Float64Array.from({ length: count }, (_, i) => (i === count - 1 ? t.toNm : t.fromNm + ((t.toNm - t.fromNm) * i) / (count - 1)));
}

/** The stack seen from the front face alone: the substrate semi-infinite (light entering it). */
export function frontFaceStack(stack: StackSpec): StackSpec {
  return {
    incident: stack.incident,
    layers: stack.layers,
    substrate: stack.substrate,
    back: 'semi-infinite',
    ...(stack.exit ? { exit: stack.exit } : {}),
  };
}

/** The worst margin of one tolerance for values (fractions 0..1) on its grid. */
export function marginOf(t: Tolerance, gridNm: ArrayLike<number>, values: ArrayLike<number>): ToleranceResult {
  let worst = Number.POSITIVE_INFINITY;
  let at = Number.NaN;
  let value = Number.NaN;
  for (let i = 0; i < gridNm.length; i++) {
    const v = 100 * (values[i] as number);
    const low = t.atLeastPercent === undefined ? Number.POSITIVE_INFINITY : v - t.atLeastPercent;
    const high = t.atMostPercent === undefined ? Number.POSITIVE_INFINITY : t.atMostPercent - v;
    // NaN (a singular stack) must fail, never pass: `!(m >= worst)` takes it.
    const m = Math.min(low, high);
    if (!(m >= worst)) {
      worst = Number.isNaN(m) ? Number.NEGATIVE_INFINITY : m;
      at = gridNm[i] as number;
      value = v;
    }
  }
  return { worstMarginPp: worst, worstAtNm: at, valuePercent: value, pass: worst >= 0 };
}

/** The spectrum of `stack` on a tolerance's grid at its angle, polarisation and face: the quantity it bounds. */
export function toleranceSpectrum(stack: StackSpec, t: Tolerance, gridNm: Float64Array = toleranceGrid(t)): Float64Array {
  const out = { R: new Float64Array(gridNm.length), T: new Float64Array(gridNm.length), A: new Float64Array(gridNm.length) };
  spectrum(out, buildOpticalModel(t.face === 'front' ? frontFaceStack(stack) : stack, gridNm, t.angleDeg), t.pol);
  return t.quantity === 'T' ? out.T : out.R;
}

/** Whether `stack` meets every tolerance, and by how much each is met or missed. */
export function checkTolerances(stack: StackSpec, tolerances: readonly Tolerance[]): ToleranceVerdict {
  const results = tolerances.map((t) => {
    const grid = toleranceGrid(t);
    return marginOf(t, grid, toleranceSpectrum(stack, t, grid));
  });
  return {
    results,
    pass: results.every((r) => r.pass),
    worstMarginPp: results.reduce((w, r) => Math.min(w, r.worstMarginPp), Number.POSITIVE_INFINITY),
  };
}

/** A tolerance in words: "T ≥ 98 % over 620–800 nm, 0°, unpolarised". */
export function describeTolerance(t: Tolerance): string {
  const bounds =
    t.atLeastPercent !== undefined && t.atMostPercent !== undefined
      ? `${t.atLeastPercent} % ≤ ${t.quantity} ≤ ${t.atMostPercent} %`
      : t.atLeastPercent !== undefined
        ? `${t.quantity} ≥ ${t.atLeastPercent} %`
        : `${t.quantity} ≤ ${t.atMostPercent} %`;
  const range = t.fromNm === t.toNm ? `at ${t.fromNm} nm` : `over ${t.fromNm}–${t.toNm} nm`;
  const pol = t.pol === 'mean' ? 'unpolarised' : `${t.pol}-polarised`;
  return `${bounds} ${range}, ${t.angleDeg}°, ${pol}${t.face === 'front' ? ', coated face only' : ''}`;
}

/**
 * A binomial proportion's 95 % interval by the Wilson score method (E. B. Wilson, "Probable
 * inference, the law of succession, and statistical inference", J. Am. Stat. Assoc. 22 (1927)
 * 209–212): for k successes in n trials, with z = 1.959964,
 * (p̂ + z²/2n ± z·√(p̂(1−p̂)/n + z²/4n²)) / (1 + z²/n). Unlike p̂ ± z·√(p̂(1−p̂)/n) it stays inside
 * 0..1 and does not collapse to a point at 0 or n successes.
 */
export function wilsonInterval(successes: number, trials: number): { low: number; high: number } {
  if (!(trials > 0)) return { low: Number.NaN, high: Number.NaN };
  const z = 1.959963984540054;
  const p = successes / trials;
  const z2n = (z * z) / trials;
  const centre = p + z2n / 2;
  const half = z * Math.sqrt((p * (1 - p)) / trials + z2n / (4 * trials));
  const denominator = 1 + z2n;
  return { low: Math.max(0, (centre - half) / denominator), high: Math.min(1, (centre + half) / denominator) };
}
