// The destination-first Cholesky of the per-reading filters against the allocating inverse, and
// a matrix that is not positive definite.
import { describe, expect, it } from 'vitest';
import { choleskyInto, choleskyInverseInto, choleskySolveInto, inverse } from '../../../src/model/numeric/dense.ts';

describe('destination-first Cholesky', () => {
  // A symmetric positive-definite 4×4 (derived: diagonally dominant with a positive diagonal).
  const A = Float64Array.of(4, 1, 0.5, 0.2, 1, 3, 0.3, 0.1, 0.5, 0.3, 2, 0.4, 0.2, 0.1, 0.4, 1.5);
  const n = 4;

  it('its inverse equals the allocating one, and a solve gives A x = b', () => {
    const L = new Float64Array(n * n).fill(Number.NaN); // stale scratch must not matter
    expect(choleskyInto(L, A, n)).toBe(true);
    const inv = choleskyInverseInto(new Float64Array(n * n), L, n, new Float64Array(n));
    const want = inverse(A, n);
    for (let i = 0; i < n * n; i++) expect(inv[i]).toBeCloseTo(want[i] as number, 12);
    const b = Float64Array.of(1, -2, 0.5, 3);
    const x = choleskySolveInto(new Float64Array(n), L, b, n);
    for (let i = 0; i < n; i++) {
      let sum = 0;
      for (let j = 0; j < n; j++) sum += (A[i * n + j] as number) * (x[j] as number);
      expect(sum).toBeCloseTo(b[i] as number, 12);
    }
  });

  it('says false for a matrix that is not positive definite, or has NaN in it', () => {
    const L = new Float64Array(4);
    expect(choleskyInto(L, Float64Array.of(1, 2, 2, 1), 2)).toBe(false); // eigenvalues 3 and −1
    expect(choleskyInto(L, Float64Array.of(Number.NaN, 0, 0, 1), 2)).toBe(false);
  });
});
