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
import { CODE_MAX, fixedQuantParams } from '../engine/index.js';
import type { ActivationName } from '../model/index.js';

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

/**
 * The integer engine against the float64 reference on the same stored (dequantised) weights.
 * Its one approximation is the per-row quantisation of each dense layer's input: a row whose
 * values span [min(0, min x), max(0, max x)] is rounded to codes with step s = span / CODE_MAX, an
 * error of at most s / 2 per value. Treating those roundings as independent and uniform on
 * [-s/2, s/2] (variance s^2 / 12; common practice for rounding noise), output n of a dense layer
 * carries a standard deviation of
 *     σ_n = sqrt(Σ_k w_kn^2 · (σ_k^2 + s^2 / 12))
 * where σ_k is the deviation input k already carried from earlier layers, and s is taken from the
 * reference's span widened by 2 · INT8_SIGMAS · max σ_k (the engine quantises its own, perturbed,
 * input). An activation scales σ by its Lipschitz constant (INT8_LIPSCHITZ), batch normalisation
 * by |gamma / sqrt(var + eps)|. An element passes within INT8_SIGMAS deviations, plus the float32
 * tolerance for the float steps around the integer sums:
 *     |a - b| <= INT8_SIGMAS · σ + max(abs, rel · max(|b|, REL_FLOOR)).
 * Why not the worst case Σ |w| · s / 2: it is never exceeded but measured 40x the real errors on
 * seeded models, too loose to notice a bias off by 0.05. Six deviations leave room for the
 * roundings' dependence on each other (inputs of a row share s) while a wrong weight, bias or
 * layout of ordinary size fails; a row whose roundings all fall the same way (a constant row) can
 * exceed it, and then the check fails loudly rather than passing a wrong answer.
 */
export const INT8_SIGMAS = 6;

export const INT8_LIPSCHITZ: Readonly<Record<ActivationName, (alpha: number) => number>> = {
  linear: () => 1,
  relu: () => 1,
  leaky_relu: (alpha) => Math.max(1, Math.abs(alpha)),
  // The logistic's slope peaks at 1/4 (at 0); tanh's at 1; softplus's slope is the logistic, below 1.
  sigmoid: () => 0.25,
  tanh: () => 1,
  softplus: () => 1,
  // Per row: |Δp_i| <= Σ_j |∂p_i/∂z_j| · max|Δz| = 2 p_i (1 - p_i) · max|Δz| <= max|Δz| / 2.
  softmax: () => 0.5,
};

/**
 * Variance of one row's activation rounding, s^2 / 12, its span widened by 2 · INT8_SIGMAS ·
 * `carriedSigma` and by twice `carriedShift` (a bound from clamping upstream).
 */
export function int8RoundingVariance(row: ArrayLike<number>, carriedSigma: number, carriedShift = 0): number {
  let lo = 0;
  let hi = 0;
  for (let i = 0; i < row.length; i++) {
    lo = Math.min(lo, row[i]);
    hi = Math.max(hi, row[i]);
  }
  const step = (hi - lo + 2 * INT8_SIGMAS * carriedSigma + 2 * carriedShift) / CODE_MAX;
  return (step * step) / 12;
}

/**
 * A stored activation range (shrink --calibrate) as the check sees it: every row is rounded with
 * the range's one step s (variance s^2 / 12, as above), and a value beyond the ends the codes
 * 0..CODE_MAX reach is clamped to the nearer end. That clamp is not noise but a known move of the
 * input, |x - clamp(x)|; the check carries it forward as a bound of its own, Σ_k |w_kn| · move_k
 * per output (through a layer's Lipschitz constant, as the deviations), added to the allowance.
 * Clamping moves a value no further than the distance it already had, so a deviation carried
 * from earlier layers does not grow by passing through it.
 */
export function int8StoredRange(min: number, max: number): { variance: number; clampError: (x: number) => number } {
  // The engine's own scale and zero point; the ends the codes reach are codes 0 and CODE_MAX around
  // the zero point (within half a step of the range's ends).
  const { scale: step, zero } = fixedQuantParams(min, max);
  const bottom = -zero * step;
  const top = (CODE_MAX - zero) * step;
  return {
    variance: (step * step) / 12,
    clampError: (x) => Math.max(0, x - top, bottom - x),
  };
}

/** Largest allowed |engine - reference| for one element carrying deviation `sigma`. */
export function int8Allowed(sigma: number, reference: number, tol: Tolerance = FLOAT32_TOLERANCE): number {
  return INT8_SIGMAS * sigma + Math.max(tol.abs, tol.rel * Math.max(Math.abs(reference), REL_FLOOR));
}
