/**
 * How close the float32 engine must come to the float64 reference: the one place for the numbers.
 *
 * An element passes when   |a - b| <= abs   or   |a - b| / max(|b|, REL_FLOOR) <= rel
 * (a = engine, b = reference).
 *
 * Why these values: float32 rounds each operation to within u = 2^-24 ≈ 6e-8 relative. A dot
 * product of k terms accumulates at most about k·u·Σ|terms| and typically √k·u·Σ|terms|; the
 * inputs are float32 on both paths, so only the arithmetic differs. For the widths this runtime
 * targets (up to ~1000 inputs per unit, a handful of layers, normalised activations of order 1)
 * that is about 1e-6 to 1e-5 absolute. abs = 1e-4 leaves an order of magnitude of headroom for
 * unlucky cancellation and batchnorm's 1/sqrt(var + eps) amplification, yet one wrong weight of
 * ordinary size moves outputs by 1e-2 or more and fails. rel = 1e-4 (≈ 1700 u) covers outputs much
 * larger than 1, whose absolute error grows with the value. REL_FLOOR keeps reference values near
 * zero from turning a tiny absolute error into a huge relative one.
 *
 * Measured (js engine, 256 seeded rows, every activation, batchnorm and dropout mixed in, widths up
 * to 784-512-512-10): the largest absolute error was 3.4e-6, about 30 times inside `abs`.
 */
export interface Tolerance {
  readonly abs: number;
  readonly rel: number;
}

export const FLOAT32_TOLERANCE: Tolerance = { abs: 1e-4, rel: 1e-4 };

/** Below this magnitude the relative error is measured against REL_FLOOR instead of |b|. */
export const REL_FLOOR = 1e-3;

/** |a - b| / max(|b|, REL_FLOOR). */
export function relativeError(a: number, b: number): number {
  return Math.abs(a - b) / Math.max(Math.abs(b), REL_FLOOR);
}

/**
 * How far past the tolerance one element is: <= 1 passes. The smaller of the two ratios, since
 * meeting either bound is enough. A NaN on one side only never passes.
 */
export function toleranceRatio(a: number, b: number, tol: Tolerance): number {
  if (Number.isNaN(a) || Number.isNaN(b)) return Number.isNaN(a) && Number.isNaN(b) ? 0 : Infinity;
  if (a === b) return 0;
  return Math.min(Math.abs(a - b) / tol.abs, relativeError(a, b) / tol.rel);
}

/** Whether one engine value matches its reference value. */
export function withinTolerance(a: number, b: number, tol: Tolerance = FLOAT32_TOLERANCE): boolean {
  return toleranceRatio(a, b, tol) <= 1;
}
