/**
 * The reference path's matrix product: a plain float64 triple loop in i-k-j order (the innermost
 * loop walks rows of B and C with stride 1, which keeps both in cache; see the implementation).
 * It lives beside the layer kinds, whose reference halves use it, because model/ may not import
 * reference/; this module is the reference path's public name for it.
 * @example matMul64(Float64Array.of(1, 2), 1, 2, Float64Array.of(3, 4), 1) // [11]
 */
export { matMul64, matMulTransA64, matMulTransB64 } from '../model/layers/mat64.js';
