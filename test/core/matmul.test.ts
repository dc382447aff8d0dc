import { Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { SeededRng } from '../../src/model/index.js';
import { matMul64, matMulTransA64, matMulTransB64 } from '../../src/reference/index.js';
import { randomMatrix } from './helpers.js';

function toMatrix(data: Float64Array, rows: number, cols: number): Matrix {
  return new Matrix(Array.from({ length: rows }, (_, r) => Array.from(data.subarray(r * cols, (r + 1) * cols))));
}

function maxDiff(ours: Float64Array, theirs: Matrix): number {
  const flat = theirs.to1DArray();
  return Math.max(...flat.map((v, i) => Math.abs(v - ours[i])));
}

const shapes: [number, number, number][] = [
  [1, 1, 1],
  [3, 5, 2],
  [17, 9, 31],
  [64, 100, 10],
  [2, 257, 3],
];

describe('reference matrix products against ml-matrix', () => {
  it.each(shapes)('A[%i x %i]·B[%i cols] agrees with ml-matrix mmul to 1e-12 (ml-matrix)', (n, k, m) => {
    const rng = new SeededRng(n * 1000 + k * 10 + m);
    const a = randomMatrix(rng, n, k);
    const b = randomMatrix(rng, k, m);
    expect(maxDiff(matMul64(a, n, k, b, m), toMatrix(a, n, k).mmul(toMatrix(b, k, m)))).toBeLessThan(1e-12);
  });

  it.each(shapes)('the transposed products Aᵀ·B and A·Bᵀ agree with ml-matrix to 1e-12 ([%i, %i, %i]) (ml-matrix)', (n, k, m) => {
    const rng = new SeededRng(n + k + m);
    const a = randomMatrix(rng, n, k);
    const b = randomMatrix(rng, n, m);
    expect(
      maxDiff(
        matMulTransA64(a, n, k, b, m),
        toMatrix(a, n, k)
          .transpose()
          .mmul(toMatrix(b, n, m)),
      ),
    ).toBeLessThan(1e-12);
    const c = randomMatrix(rng, m, k);
    expect(maxDiff(matMulTransB64(a, n, k, c, m), toMatrix(a, n, k).mmul(toMatrix(c, m, k).transpose()))).toBeLessThan(1e-12);
  });
});
