/**
 * How close a shrunken model must come to its float32 parent at the output: the one place for
 * these numbers. An element passes when |a - b| <= abs or |a - b| / max(|b|, 1e-3) <= rel,
 * the same rule as the engine-versus-reference tolerance.
 *
 * Why these values:
 * - f32: nothing is rounded beyond float32, so the float32 parity tolerance applies (folded
 *   models, which round float64 folds to float32 once, are held to it too).
 * - f16: binary16 keeps 11 significant bits, so each weight moves by at most 2^-11 ≈ 4.9e-4 of
 *   itself. Errors of independent weights add roughly as √k in a k-term dot product and the
 *   relative error of a sum stays near the per-term error unless terms cancel; through a few
 *   layers that is a few 1e-3 at the output. 1e-2 leaves headroom for cancellation, yet a
 *   weight stored with the wrong exponent (a real codec bug) moves outputs far more.
 * - i8: a weight moves by at most half a step, maxabs_col / 254 ≈ 0.4 % of its column's largest
 *   weight, so small weights carry relatively large errors; a few layers give 1e-2 to 3e-2
 *   relative at the output. 5e-2 bounds that, and a wrong scale or sign fails it.
 * An element passes when EITHER bound holds, so small outputs (softmax probabilities near 1e-3)
 * are judged by `abs` and large ones by `rel`.
 * Measured (256 seeded rows, float64 reference path for both; test/transform/shrink.test.ts):
 *   bakery shape 7-32-3:  f16 max abs 4.8e-4 (max rel 1.9e-3); i8 max abs 8.2e-3, top class 99.2 %
 *   64-256-256-10:        f16 max abs 4.1e-4 (max rel 1.9e-3); i8 max abs 9.7e-3, top class 98.8 %
 *   (i8's max rel reaches 6e-2 on outputs near zero; the abs bound is what judges those.)
 */
import { FLOAT32_TOLERANCE, type Tolerance } from '../check/index.js';
import type { StorageCodec } from '../model/index.js';

export const SHRINK_TOLERANCE: Readonly<Record<StorageCodec, Tolerance>> = {
  f32: FLOAT32_TOLERANCE,
  f16: { abs: 1e-2, rel: 1e-2 },
  i8: { abs: 5e-2, rel: 5e-2 },
};
