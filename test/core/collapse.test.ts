import { Matrix } from 'ml-matrix';
import { afterAll, describe, expect, it } from 'vitest';
import { withinTolerance } from '../../src/check/index.js';
import { TfjsRunner } from '../../src/engine/index.js';
import { SeededRng } from '../../src/model/index.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { denseOf, docOf } from './helpers.js';

// Common practice: with linear activations in the hidden layer an MLP collapses to one layer,
// W = W_H·W_O and B = B_H·W_O + B_O. The collapsed weights are computed with ml-matrix, not with
// our own product, and both models run through the runtime.
const rng = new SeededRng(2024);
const [nIn, nHidden, nOut] = [5, 7, 3];
const randomList = (n: number) => Array.from({ length: n }, () => 0.5 * rng.normal());
const wH = randomList(nIn * nHidden);
const bH = randomList(nHidden);
const wO = randomList(nHidden * nOut);
const bO = randomList(nOut);

const rowsOf = (flat: number[], rows: number, cols: number) => Array.from({ length: rows }, (_, r) => flat.slice(r * cols, (r + 1) * cols));
const W = new Matrix(rowsOf(wH, nIn, nHidden)).mmul(new Matrix(rowsOf(wO, nHidden, nOut)));
const B = new Matrix([bH]).mmul(new Matrix(rowsOf(wO, nHidden, nOut))).add(new Matrix([bO]));

describe.each(['linear', 'tanh'] as const)('collapse of a linear hidden layer (output activation %s)', (outAct) => {
  const twoLayer = docOf(nIn, [denseOf(wH, bH, 'linear'), denseOf(wO, bO, outAct)]);
  const oneLayer = docOf(nIn, [denseOf(W.to1DArray(), B.to1DArray(), outAct)]);
  const x = Float32Array.from({ length: 40 * nIn }, () => rng.normal());
  const two = new TfjsRunner(twoLayer);
  const one = new TfjsRunner(oneLayer);
  afterAll(() => {
    two.dispose();
    one.dispose();
  });

  it('reference: the two models agree (common practice)', () => {
    const a = referenceForward(twoLayer, toMat64(x, 40, nIn)).y.data;
    const b = referenceForward(oneLayer, toMat64(x, 40, nIn)).y.data;
    // The collapsed weights were rounded to float32 once, about 6e-8 relative.
    for (let i = 0; i < a.length; i++) expect(Math.abs(a[i] - b[i])).toBeLessThan(1e-6);
  });

  it('engine: the two models agree within float32 tolerance (common practice)', () => {
    const a = two.run(x, 40);
    const b = one.run(x, 40);
    for (let i = 0; i < a.length; i++) expect(withinTolerance(a[i], b[i]), `element ${i}: ${a[i]} vs ${b[i]}`).toBe(true);
  });
});
