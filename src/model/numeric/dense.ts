/**
 * Small dense symmetric systems (a few dozen unknowns) for the Levenberg–Marquardt steps of the
 * compensation and the chip refit: Cholesky factorisation (Golub and Van Loan, *Matrix
 * Computations*, 4.2) of A + λ·diag(A), A given in its lower triangle, row-major n×n.
 */

/** Solves (A + λ·diag(A)) x = b. A pivot that is not positive is clamped (the caller's priors keep A definite). */
export function solveDamped(A: Float64Array, b: Float64Array, n: number, lambda: number): Float64Array {
  const L = factor(A, n, lambda);
  const y = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let sum = b[i] as number;
    for (let k = 0; k < i; k++) sum -= (L[i * n + k] as number) * (y[k] as number);
    y[i] = sum / (L[i * n + i] as number);
  }
  const x = new Float64Array(n);
  for (let i = n - 1; i >= 0; i--) {
    let sum = y[i] as number;
    for (let k = i + 1; k < n; k++) sum -= (L[k * n + i] as number) * (x[k] as number);
    x[i] = sum / (L[i * n + i] as number);
  }
  return x;
}

/** The full inverse of A (λ = 0), row-major n×n: the covariance of a least-squares fit whose normal matrix is A. */
export function inverse(A: Float64Array, n: number): Float64Array {
  const L = factor(A, n, 0);
  // L⁻¹ (lower), then A⁻¹ = L⁻ᵀ L⁻¹.
  const inv = new Float64Array(n * n);
  for (let i = 0; i < n; i++) {
    inv[i * n + i] = 1 / (L[i * n + i] as number);
    for (let j = 0; j < i; j++) {
      let sum = 0;
      for (let k = j; k < i; k++) sum -= (L[i * n + k] as number) * (inv[k * n + j] as number);
      inv[i * n + j] = sum / (L[i * n + i] as number);
    }
  }
  const out = new Float64Array(n * n);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j <= i; j++) {
      let sum = 0;
      for (let k = i; k < n; k++) sum += (inv[k * n + i] as number) * (inv[k * n + j] as number);
      out[i * n + j] = sum;
      out[j * n + i] = sum;
    }
  }
  return out;
}

function factor(A: Float64Array, n: number, lambda: number): Float64Array {
  const L = new Float64Array(n * n);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j <= i; j++) {
      let sum = A[i * n + j] as number;
      if (i === j) sum += lambda * Math.max(sum, 1e-12);
      for (let k = 0; k < j; k++) sum -= (L[i * n + k] as number) * (L[j * n + k] as number);
      if (i === j) L[i * n + i] = Math.sqrt(Math.max(sum, 1e-300));
      else L[i * n + j] = sum / (L[j * n + j] as number);
    }
  }
  return L;
}

/**
 * Destination-first Cholesky for the per-reading filters (nothing allocated): L ← the lower
 * factor of the symmetric positive-definite n×n A (row-major, lower triangle read). False when a
 * pivot is not positive (A not definite), L then undefined.
 */
export function choleskyInto(L: Float64Array, A: Float64Array, n: number): boolean {
  for (let i = 0; i < n; i++) {
    for (let j = 0; j <= i; j++) {
      let sum = A[i * n + j] as number;
      for (let k = 0; k < j; k++) sum -= (L[i * n + k] as number) * (L[j * n + k] as number);
      if (i === j) {
        if (!(sum > 0)) return false;
        L[i * n + i] = Math.sqrt(sum);
      } else {
        L[i * n + j] = sum / (L[j * n + j] as number);
      }
    }
    for (let j = i + 1; j < n; j++) L[i * n + j] = 0;
  }
  return true;
}

/** x ← A⁻¹ b with L from {@link choleskyInto}; x may be b. */
export function choleskySolveInto(x: Float64Array, L: Float64Array, b: Float64Array, n: number): Float64Array {
  for (let i = 0; i < n; i++) {
    let sum = b[i] as number;
    for (let k = 0; k < i; k++) sum -= (L[i * n + k] as number) * (x[k] as number);
    x[i] = sum / (L[i * n + i] as number);
  }
  for (let i = n - 1; i >= 0; i--) {
    let sum = x[i] as number;
    for (let k = i + 1; k < n; k++) sum -= (L[k * n + i] as number) * (x[k] as number);
    x[i] = sum / (L[i * n + i] as number);
  }
  return x;
}

/** inv ← A⁻¹ (full, symmetric) with L from {@link choleskyInto}; `column` is n doubles of scratch. */
export function choleskyInverseInto(inv: Float64Array, L: Float64Array, n: number, column: Float64Array): Float64Array {
  for (let j = 0; j < n; j++) {
    column.fill(0, 0, n);
    column[j] = 1;
    choleskySolveInto(column, L, column, n);
    for (let i = 0; i < n; i++) inv[i * n + j] = column[i] as number;
  }
  return inv;
}
