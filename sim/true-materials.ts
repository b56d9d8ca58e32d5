/**
 * The chamber's true optical constants: the design's dispersion with its index scaled and its
 * absorption raised, kept as a real dispersion of the same model so that it can be evaluated at
 * every wavelength of the monitor's pass band (and anywhere else) exactly as the design's is.
 */
import type { Dispersion } from '../src/model/optics/dispersion.ts';

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
