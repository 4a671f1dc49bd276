/**
 * Autocorrelation of a reference and the largest eigenvalue of its L x L Toeplitz matrix R,
 * used for the LMS step-size bound 2 / (lambda_max + gamma) (Haykin, Adaptive Filter Theory,
 * 4th ed., ch. 5). Power iteration needs only R v products, O(L^2) each.
 */

/** Biased autocorrelation estimate r[k] = (1/N) sum x[n] x[n-k], k = 0..lags-1. */
export function autocorrelation(x: ArrayLike<number>, lags: number): Float64Array {
  const r = new Float64Array(lags);
  const n = x.length;
  for (let k = 0; k < lags && k < n; k++) {
    let s = 0;
    for (let i = k; i < n; i++) s += x[i]! * x[i - k]!;
    r[k] = s / n;
  }
  return r;
}

/** y = R v for the symmetric Toeplitz matrix with first row r. */
export function toeplitzTimes(r: Float64Array, v: Float64Array, y: Float64Array): void {
  const L = r.length;
  for (let i = 0; i < L; i++) {
    let s = 0;
    for (let j = 0; j < L; j++) s += r[i > j ? i - j : j - i]! * v[j]!;
    y[i] = s;
  }
}

/** The largest eigenvalue of the Toeplitz matrix by power iteration, to a relative tolerance. */
export function toeplitzLambdaMax(r: Float64Array, tolerance = 1e-6, maxIterations = 500): number {
  const L = r.length;
  let v = new Float64Array(L).fill(1 / Math.sqrt(L));
  // A start with every frequency in it: a unit impulse spreads over all eigenvectors.
  v[0] = 1;
  let y = new Float64Array(L);
  let lambda = 0;
  for (let it = 0; it < maxIterations; it++) {
    toeplitzTimes(r, v, y);
    let norm = 0;
    for (let i = 0; i < L; i++) norm += y[i]! * y[i]!;
    norm = Math.sqrt(norm);
    if (norm === 0) return 0;
    let vn = 0;
    for (let i = 0; i < L; i++) vn += v[i]! * v[i]!;
    const next = norm / Math.sqrt(vn);
    for (let i = 0; i < L; i++) y[i]! /= norm;
    [v, y] = [y, v];
    if (Math.abs(next - lambda) <= tolerance * next) return next;
    lambda = next;
  }
  return lambda;
}
