/**
 * Dispersion models: the complex refractive index of a material as a function of vacuum
 * wavelength.
 *
 * Sign convention (the one place it is written down): N = n − i·k with k ≥ 0 for absorption,
 * time dependence exp(+iωt), as in Macleod, *Thin-Film Optical Filters*. Every function here
 * returns n and k ≥ 0 separately; the kernel forms N = n − i·k.
 *
 * Published coefficients are in micrometres, so the formulas take λ in µm; the interface takes
 * nanometres like the rest of fringe.
 */
import { z } from 'zod';

const finite = z.number().finite();
const nonNegative = finite.nonnegative();

/** A constant index, e.g. an inline `n`/`k` in a design or a layer of an idealised study. */
export const ConstantDispersionSchema = z.strictObject({
  model: z.literal('constant'),
  n: finite.positive(),
  k: nonNegative.default(0),
});

/**
 * Cauchy: n(λ) = Σ nᵢ / λ^(2i), k(λ) = Σ kᵢ / λ^(2i), λ in µm (Cauchy's series; e.g. Born & Wolf,
 * *Principles of Optics*, §2.3; from memory). `n: [A, B, C]` is the usual A + B/λ² + C/λ⁴.
 */
export const CauchyDispersionSchema = z.strictObject({
  model: z.literal('cauchy'),
  n: z.array(finite).min(1).max(6),
  /** Coefficients of k; the series must stay ≥ 0 over the material's range (k is clamped at 0). */
  k: z.array(finite).max(6).default([]),
});

/**
 * Sellmeier: n² = A + Σ Bᵢ λ² / (λ² − Cᵢ), λ in µm (W. Sellmeier, 1871; the form of the Schott
 * catalogue). Two conventions for C are published: Schott gives Cᵢ in µm² (`cUnit: um2`),
 * Malitson gives the resonance wavelength in µm, to be squared (`cUnit: um`).
 */
export const SellmeierDispersionSchema = z.strictObject({
  model: z.literal('sellmeier'),
  A: finite.default(1),
  terms: z.array(z.strictObject({ B: finite, C: finite })).min(1).max(8),
  cUnit: z.enum(['um2', 'um']),
  k: nonNegative.default(0),
});

/**
 * Tabulated n and k against wavelength in nm, interpolated linearly in wavelength between
 * points (sorted ascending, no extrapolation).
 */
export const TableDispersionSchema = z.strictObject({
  model: z.literal('table'),
  /** Rows of [wavelengthNm, n, k]. */
  points: z
    .array(z.tuple([finite.positive(), finite.positive(), nonNegative]))
    .min(2)
    .refine(
      (rows) => rows.every((row, i) => i === 0 || row[0] > (rows[i - 1] as [number, number, number])[0]),
      { message: 'table wavelengths must increase strictly from row to row' },
    ),
});

export const DispersionSchema = z.discriminatedUnion('model', [
  ConstantDispersionSchema,
  CauchyDispersionSchema,
  SellmeierDispersionSchema,
  TableDispersionSchema,
]);

export type Dispersion = z.infer<typeof DispersionSchema>;

/** n and k (k ≥ 0 absorbing) at one wavelength. */
export interface IndexNK {
  n: number;
  k: number;
}

/**
 * Writes n and k of `dispersion` at `wavelengthNm` into `out` and returns it. Outside a table's
 * range, or where a Sellmeier term sits at its pole, n is NaN: callers check the range once at
 * the edge ({@link dispersionRangeNm}) rather than in a hot loop.
 */
export function indexAt(out: IndexNK, dispersion: Dispersion, wavelengthNm: number): IndexNK {
  const um = wavelengthNm / 1000;
  switch (dispersion.model) {
    case 'constant':
      out.n = dispersion.n;
      out.k = dispersion.k;
      return out;
    case 'cauchy': {
      out.n = cauchySeries(dispersion.n, um);
      out.k = dispersion.k.length === 0 ? 0 : Math.max(0, cauchySeries(dispersion.k, um));
      return out;
    }
    case 'sellmeier': {
      const l2 = um * um;
      let n2 = dispersion.A;
      for (const term of dispersion.terms) {
        const c = dispersion.cUnit === 'um' ? term.C * term.C : term.C;
        n2 += (term.B * l2) / (l2 - c);
      }
      out.n = n2 > 0 ? Math.sqrt(n2) : Number.NaN;
      out.k = dispersion.k;
      return out;
    }
    case 'table':
      return interpolateTable(out, dispersion.points, wavelengthNm);
  }
}

function cauchySeries(coefficients: readonly number[], um: number): number {
  const inv2 = 1 / (um * um);
  let power = 1;
  let sum = 0;
  for (const c of coefficients) {
    sum += c * power;
    power *= inv2;
  }
  return sum;
}

function interpolateTable(
  out: IndexNK,
  points: readonly (readonly [number, number, number])[],
  wavelengthNm: number,
): IndexNK {
  // Binary search for the last row at or below the wavelength.
  let lo = 0;
  let hi = points.length - 1;
  const first = points[0] as readonly [number, number, number];
  const last = points[hi] as readonly [number, number, number];
  if (!(wavelengthNm >= first[0] && wavelengthNm <= last[0])) {
    out.n = Number.NaN;
    out.k = Number.NaN;
    return out;
  }
  while (hi - lo > 1) {
    const mid = (lo + hi) >> 1;
    if ((points[mid] as readonly [number, number, number])[0] <= wavelengthNm) lo = mid;
    else hi = mid;
  }
  const a = points[lo] as readonly [number, number, number];
  const b = points[hi] as readonly [number, number, number];
  const t = b[0] === a[0] ? 0 : (wavelengthNm - a[0]) / (b[0] - a[0]);
  out.n = a[1] + t * (b[1] - a[1]);
  out.k = a[2] + t * (b[2] - a[2]);
  return out;
}

/**
 * The wavelength range in which the model itself can be evaluated ([0, ∞) for formulas;
 * the table's span for tables). A material's *validity* range is narrower and is stated in the
 * material library.
 */
export function dispersionRangeNm(dispersion: Dispersion): [number, number] {
  if (dispersion.model !== 'table') return [0, Number.POSITIVE_INFINITY];
  const first = dispersion.points[0] as readonly [number, number, number];
  const last = dispersion.points[dispersion.points.length - 1] as readonly [number, number, number];
  return [first[0], last[0]];
}

/**
 * A dispersion with n_true(λ) = n(λ)·`indexFactor` and k_true(λ) = k(λ) + `extraK` at every λ,
 * of the same model as `design`:
 * - constant: n·f, k + Δk;
 * - Cauchy: every n coefficient × f (the series is linear in them); Δk added to the first k
 *   coefficient (so k_true = max(0, k series + Δk): exact wherever the design's k series is ≥ 0,
 *   which the material schema asks for);
 * - Sellmeier: A and every B × f², so n² scales by f² and n by f (the poles Cᵢ stay); k + Δk;
 * - table: every n × f, every k + Δk (linear interpolation commutes with both).
 * Equal to the design's to rounding (a few ulps), and the very object when f = 1 and Δk = 0.
 */
export function scaledDispersion(design: Dispersion, indexFactor: number, extraK: number): Dispersion {
  if (!(indexFactor > 0) || !(extraK >= 0)) throw new RangeError('the index factor must be > 0 and the extra k ≥ 0');
  if (indexFactor === 1 && extraK === 0) return design;
  const f = indexFactor;
  switch (design.model) {
    case 'constant':
      return { model: 'constant', n: design.n * f, k: design.k + extraK };
    case 'cauchy': {
      const k = design.k.length === 0 ? (extraK === 0 ? [] : [extraK]) : design.k.map((c, i) => (i === 0 ? c + extraK : c));
      return { model: 'cauchy', n: design.n.map((c) => c * f), k };
    }
    case 'sellmeier':
      return {
        model: 'sellmeier',
        A: design.A * f * f,
        terms: design.terms.map((t) => ({ B: t.B * f * f, C: t.C })),
        cUnit: design.cUnit,
        k: design.k + extraK,
      };
    case 'table':
      return { model: 'table', points: design.points.map(([w, n, k]) => [w, n * f, k + extraK] as [number, number, number]) };
  }
}
