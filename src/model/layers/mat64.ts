/**
 * Plain float64 matrix loops shared by the layers' reference halves and src/reference/. No tfjs:
 * these are the numbers the engine is held to.
 */
import type { Mat64 } from './kind.js';

/** A rows x cols float64 matrix, zero-filled or wrapping `data`. */
export function mat64(rows: number, cols: number, data?: Float64Array): Mat64 {
  if (data && data.length !== rows * cols) {
    throw new RangeError(`mat64: data has ${data.length} values, expected ${rows} x ${cols} = ${rows * cols}`);
  }
  return { rows, cols, data: data ?? new Float64Array(rows * cols) };
}

/**
 * C = A·B for row-major A [n, k] and B [k, m] (B may be float32, e.g. a layer's weight).
 *
 * Loop order i-k-j: the innermost loop walks one row of B and one row of C with stride 1,
 * so both stay in cache lines, where the textbook i-j-k order strides down a column of B.
 * Each C[i][j] still sums its k terms in ascending k, like a dot product.
 * @example matMul64(a, 2, 3, b, 4) // 2 x 4
 */
export function matMul64(a: ArrayLike<number>, n: number, k: number, b: ArrayLike<number>, m: number): Float64Array {
  const c = new Float64Array(n * m);
  for (let i = 0; i < n; i++) {
    const ci = i * m;
    for (let p = 0; p < k; p++) {
      const aip = a[i * k + p];
      if (aip === 0) continue;
      const bp = p * m;
      for (let j = 0; j < m; j++) c[ci + j] += aip * b[bp + j];
    }
  }
  return c;
}

/** C = Aᵀ·B for A [n, k] and B [n, m]: gives C [k, m] (a weight gradient xᵀ·dz). */
export function matMulTransA64(a: ArrayLike<number>, n: number, k: number, b: ArrayLike<number>, m: number): Float64Array {
  const c = new Float64Array(k * m);
  for (let i = 0; i < n; i++) {
    const bi = i * m;
    for (let p = 0; p < k; p++) {
      const aip = a[i * k + p];
      if (aip === 0) continue;
      const cp = p * m;
      for (let j = 0; j < m; j++) c[cp + j] += aip * b[bi + j];
    }
  }
  return c;
}

/** C = A·Bᵀ for A [n, m] and B [k, m]: gives C [n, k] (an input gradient dz·Wᵀ). */
export function matMulTransB64(a: ArrayLike<number>, n: number, m: number, b: ArrayLike<number>, k: number): Float64Array {
  const c = new Float64Array(n * k);
  for (let i = 0; i < n; i++) {
    const ai = i * m;
    for (let p = 0; p < k; p++) {
      const bp = p * m;
      let s = 0;
      for (let j = 0; j < m; j++) s += a[ai + j] * b[bp + j];
      c[i * k + p] = s;
    }
  }
  return c;
}

/** Column sums of a rows x cols matrix (a bias gradient). */
export function columnSums64(a: ArrayLike<number>, rows: number, cols: number): Float64Array {
  const s = new Float64Array(cols);
  for (let r = 0; r < rows; r++) {
    const o = r * cols;
    for (let c = 0; c < cols; c++) s[c] += a[o + c];
  }
  return s;
}
