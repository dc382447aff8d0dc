import { describe, expect, it } from 'vitest';
import { SimdRunner } from '../../src/engine/fast/simd-runner.js';
import { instantiateDenseKernel, relaxedMaddAvailable } from '../../src/engine/fast/dense-kernel.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { SeededRng, type ActivationName, type BatchNormLayer, type ModelDoc } from '../../src/model/index.js';
import { denseStackDoc, seededRows } from '../../src/bench/models.js';
import { ShapeError } from '../../src/errors.js';

/** Worst absolute error against the float64 reference path. */
function worstAgainstReference(doc: ModelDoc, rows: number, seed: number, chunkRows?: number): number {
  const x = seededRows(rows, doc.inputs, seed);
  const y = new SimdRunner(doc, { chunkRows }).run(x, rows);
  const ref = referenceForward(doc, toMat64(x, rows, doc.inputs)).y.data;
  expect(y.length).toBe(ref.length);
  let worst = 0;
  for (let i = 0; i < ref.length; i++) worst = Math.max(worst, Math.abs(y[i]! - ref[i]!));
  return worst;
}

// float32 against float64: a few ulps of float32 per accumulated product (common practice).
const TOL = 2e-5;

describe('SimdRunner (own WebAssembly SIMD dense kernel)', () => {
  // Both accumulation forms: plain multiply then add, and f32x4.relaxed_madd where it validates.
  const forms = [false, ...(relaxedMaddAvailable() ? [true] : [])];
  it.each(forms.flatMap((fused) => [5, 300].map((nIn) => [fused, nIn] as const)))(
    'computes 4-row tiles and single rows like a plain product loop written in the test (fused %s, %i inputs), with and without ReLU',
    (fused, nIn) => {
      const outP = 48; // odd multiple of 16: whole 8-column tiles and a 16-column remainder
      const rows = 6; // one block of 4 rows and two single rows
      const k = instantiateDenseKernel(1 << 20, { fused });
      const f = new Float32Array(k.memory.buffer);
      const rng = new SeededRng(4);
      const xo = 0,
        wo = 4096,
        bo = 32768,
        yo = 40960;
      for (let i = 0; i < rows * nIn; i++) f[xo + i] = rng.normal();
      for (let i = 0; i < nIn * outP; i++) f[wo + i] = rng.normal();
      for (let i = 0; i < outP; i++) f[bo + i] = rng.normal();
      for (const relu of [0, 1]) {
        k.dense(xo * 4, wo * 4, bo * 4, yo * 4, rows, nIn, outP, relu);
        for (let r = 0; r < rows; r++) {
          for (let j = 0; j < outP; j++) {
            let s = f[bo + j]!;
            let magnitude = Math.abs(s);
            for (let q = 0; q < nIn; q++) {
              const term = f[xo + r * nIn + q]! * f[wo + q * outP + j]!;
              s += term;
              magnitude += Math.abs(term);
            }
            if (relu) s = Math.max(s, 0);
            // Recursive summation in float32: |error| <= n·u·Σ|terms|, u = 2^-24 (Higham 2002, Accuracy and Stability of Numerical Algorithms, 4.2).
            const bound = (nIn + 1) * 2 ** -24 * magnitude;
            expect(Math.abs(f[yo + r * outP + j]! - s), `row ${r} column ${j}`).toBeLessThanOrEqual(bound);
          }
        }
      }
    },
  );

  it.each([
    ['relu', 'linear'],
    ['relu', 'softmax'],
    ['tanh', 'sigmoid'],
    ['leaky_relu', 'softplus'],
    ['sigmoid', 'tanh'],
  ] satisfies [ActivationName, ActivationName][])('matches the float64 reference: hidden %s, output %s', (hidden, last) => {
    const doc = denseStackDoc([13, 37, 21, 5], 3, hidden, last);
    for (const rows of [1, 3, 4, 5, 64]) expect(worstAgainstReference(doc, rows, rows)).toBeLessThan(TOL);
  });

  it('matches the reference across chunk boundaries and for 784-512-256-10', () => {
    expect(worstAgainstReference(denseStackDoc([30, 17, 3], 5), 103, 2, 16)).toBeLessThan(TOL);
    expect(worstAgainstReference(denseStackDoc([784, 512, 256, 10], 1), 9, 6)).toBeLessThan(1e-4);
    // 513 inputs: two whole k blocks of 256 and a block of 1; ReLU only after the last block.
    expect(worstAgainstReference(denseStackDoc([513, 40, 3], 9, 'relu', 'linear'), 6, 4)).toBeLessThan(1e-4);
  });

  it('applies input normalisation, batch normalisation and dropout (identity) like the reference', () => {
    const base = denseStackDoc([6, 20, 4], 8, 'relu', 'softmax');
    const rng = new SeededRng(12);
    const bn: BatchNormLayer = {
      kind: 'batchnorm',
      gamma: Float32Array.from({ length: 20 }, () => 0.5 + rng.next()),
      beta: Float32Array.from({ length: 20 }, () => 0.2 * rng.normal()),
      runningMean: Float32Array.from({ length: 20 }, () => 0.3 * rng.normal()),
      runningVariance: Float32Array.from({ length: 20 }, () => 0.5 + rng.next()),
      epsilon: 1e-3,
      momentum: 0.9,
    };
    const layers = [base.layers[0]!, bn, { kind: 'dropout' as const, rate: 0.3 }, base.layers[1]!];
    const zscore: ModelDoc = {
      ...base,
      layers,
      normalise: { method: 'zscore', mean: Float64Array.from([1, -2, 0.5, 3, 0, 10]), std: Float64Array.from([2, 0.5, 1, 4, 0, 3]), m2: null, count: 100 },
    };
    const minmax: ModelDoc = {
      ...base,
      layers,
      normalise: { method: 'minmax', min: Float64Array.from([-1, -2, -3, 0, 5, 1]), max: Float64Array.from([1, 2, 3, 4, 5, 9]), count: 100 },
    };
    expect(worstAgainstReference(zscore, 17, 1)).toBeLessThan(TOL);
    expect(worstAgainstReference(minmax, 17, 2)).toBeLessThan(TOL);
  });

  it('refuses input that is not rows x inputs with a ShapeError', () => {
    const fast = new SimdRunner(denseStackDoc([4, 8, 2], 1));
    expect(() => fast.run(new Float32Array(7), 2)).toThrow(ShapeError);
  });

  it.each(forms)('gives a row the same bits whatever else shares its batch (4-row tiles and single rows sum alike; fused %s)', (fused) => {
    for (const widths of [
      [7, 32, 16, 3],
      [513, 40, 3],
      [784, 64, 10],
    ]) {
      const doc = denseStackDoc(widths, 3);
      const fast = new SimdRunner(doc, { kernel: { fused } });
      const rows = 11; // two 4-row tiles and three single rows
      const x = seededRows(rows, doc.inputs, 5);
      const together = fast.run(x, rows);
      const out = widths[widths.length - 1];
      for (let r = 0; r < rows; r++) {
        const alone = fast.run(x.subarray(r * doc.inputs, (r + 1) * doc.inputs), 1);
        expect(Array.from(alone), `widths ${widths.join('-')}, row ${r}`).toEqual(Array.from(together.subarray(r * out, (r + 1) * out)));
      }
    }
  });

  it('refuses to run after dispose, like the tfjs sessions', () => {
    const fast = new SimdRunner(denseStackDoc([4, 8, 2], 1));
    fast.dispose();
    expect(() => fast.run(new Float32Array(4), 1)).toThrow(/disposed/);
  });

  it("reports each layer's output for the parity check, the last equal to run", () => {
    const doc = denseStackDoc([6, 12, 5, 3], 2);
    const fast = new SimdRunner(doc);
    const x = seededRows(9, 6, 3);
    const layers = fast.runLayers(x, 9);
    expect(layers.map((l) => l.length)).toEqual([9 * 12, 9 * 5, 9 * 3]);
    expect(Array.from(layers[2])).toEqual(Array.from(fast.run(x, 9)));
    const ref = referenceForward(doc, toMat64(x, 9, 6), { keepLayers: true }).layers!;
    layers.forEach((l, i) => l.forEach((v, k) => expect(Math.abs(v - ref[i].data[k])).toBeLessThan(TOL)));
  });
});
