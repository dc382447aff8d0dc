import { describe, expect, it } from 'vitest';
import { FLOAT32_TOLERANCE, randomInputs } from '../../src/check/index.js';
import { SeededRng, type DenseLayer, type ModelDoc } from '../../src/model/index.js';
import { compareOutputs, foldModel } from '../../src/transform/index.js';
import { bakeryDoc, docOf, randomBatchNorm, randomDense, wideMinmaxOf, wideZscoreOf } from '../fixtures/models.js';

function parity(original: ModelDoc, folded: ModelDoc, rows = 512, seed = 3) {
  return compareOutputs(original, folded, randomInputs(original, rows, seed), rows, FLOAT32_TOLERANCE);
}

function denseAt(doc: ModelDoc, i: number): DenseLayer {
  const l = doc.layers[i];
  if (l.kind !== 'dense') throw new Error(`layers[${i}] is ${l.kind}`);
  return l;
}

describe('foldModel', () => {
  it('linear-collapse identity W = W1·W2, b = b1·W2 + b2 (common practice), on hand-computed numbers', () => {
    // W1 = [[1, 2], [3, 4]], b1 = [1, 1]; W2 = [[1], [1]], b2 = [0.5]
    // W1·W2 = [[3], [7]]; b1·W2 + b2 = 1 + 1 + 0.5 = 2.5
    const doc = docOf(2, [
      { kind: 'dense', size: 2, activation: 'linear', alpha: 0, weight: Float32Array.of(1, 2, 3, 4), bias: Float32Array.of(1, 1) },
      { kind: 'dense', size: 1, activation: 'sigmoid', alpha: 0, weight: Float32Array.of(1, 1), bias: Float32Array.of(0.5) },
    ]);
    const { doc: folded, steps } = foldModel(doc);
    expect(folded.layers).toHaveLength(1);
    const only = denseAt(folded, 0);
    expect(Array.from(only.weight)).toEqual([3, 7]);
    expect(Array.from(only.bias)).toEqual([2.5]);
    expect(only.activation).toBe('sigmoid');
    expect(steps).toContainEqual({ step: 'linear-collapse', layers: [0, 1], folded: true });
  });

  it('batch-norm inference formula y = gamma (x - mean) / sqrt(var + eps) + beta (Ioffe and Szegedy 2015), on hand-computed numbers', () => {
    // feature 0: gamma 2, beta 0.5, mean 1, var 3, eps 1 -> a = 2 / sqrt(4) = 1, c = 0.5 - 1·1 = -0.5
    // feature 1: gamma 1, beta 0, mean -2, var 0.24, eps 1 -> a = 1 / sqrt(1.24), c = 2 / sqrt(1.24)
    const doc = docOf(2, [
      {
        kind: 'batchnorm',
        gamma: Float32Array.of(2, 1),
        beta: Float32Array.of(0.5, 0),
        runningMean: Float32Array.of(1, -2),
        runningVariance: Float32Array.of(3, 0.24),
        epsilon: 1,
        momentum: 0.9,
      },
      { kind: 'dense', size: 2, activation: 'relu', alpha: 0, weight: Float32Array.of(1, 0, 0, 1), bias: Float32Array.of(0, 0) },
    ]);
    const { doc: folded } = foldModel(doc);
    const d = denseAt(folded, 0);
    const a1 = 1 / Math.sqrt(Math.fround(0.24) + 1);
    expect(Array.from(d.weight)).toEqual([1, 0, 0, Math.fround(a1)]);
    expect(d.bias[0]).toBe(-0.5);
    expect(d.bias[1]).toBe(Math.fround(2 * a1));
  });

  it('folds z-score normalisation and drops dropout in the bakery shape: 3 layers -> 2, same answers within float32 tolerance', () => {
    const doc = bakeryDoc(7);
    const { doc: folded, steps } = foldModel(doc);
    expect(folded.layers.map((l) => l.kind)).toEqual(['dense', 'dense']);
    expect(folded.normalise).toBeNull();
    expect(
      steps
        .filter((s) => s.folded)
        .map((s) => s.step)
        .sort(),
    ).toEqual(['dropout', 'normalisation']);
    const c = parity(doc, folded);
    // Measured: max abs error 1.2e-6 on 512 rows, against FLOAT32_TOLERANCE abs 1e-4.
    expect(c.maxAbs).toBeLessThan(1e-5);
    expect(c.pass).toBe(true);
    expect(c.topClassAgreement).toBe(1);
    expect(folded.provenance.at(-1)?.action).toBe('folded');
    // The input document is untouched.
    expect(doc.layers).toHaveLength(3);
    expect(doc.normalise).not.toBeNull();
  });

  it('min-max normalisation, batch norm after a linear layer and a chain of linear layers collapse to one layer', () => {
    const rng = new SeededRng(11);
    const doc = docOf(
      5,
      [randomDense(rng, 5, 8, 'linear'), randomBatchNorm(rng, 8), randomDense(rng, 8, 6, 'linear'), randomDense(rng, 6, 2, 'sigmoid')],
      wideMinmaxOf(rng, 5),
    );
    const { doc: folded, steps } = foldModel(doc);
    expect(folded.layers).toHaveLength(1);
    expect(steps.find((s) => s.step === 'batchnorm')?.reason).toMatch(/before it/);
    const c = parity(doc, folded);
    expect(c.maxAbs).toBeLessThan(1e-5);
    expect(c.pass).toBe(true);
  });

  it('batch norm after a ReLU layer folds into the dense layer after it; answers within float32 tolerance', () => {
    const rng = new SeededRng(5);
    const doc = docOf(
      6,
      [randomDense(rng, 6, 12, 'relu'), randomBatchNorm(rng, 12), { kind: 'dropout', rate: 0.3 }, randomDense(rng, 12, 4, 'tanh')],
      wideZscoreOf(rng, 6),
    );
    const { doc: folded, steps } = foldModel(doc);
    expect(folded.layers.map((l) => l.kind)).toEqual(['dense', 'dense']);
    expect(steps.find((s) => s.step === 'batchnorm')).toMatchObject({ folded: true, layers: [1] });
    expect(parity(doc, folded).pass).toBe(true);
  });

  it('leaves what it cannot fold exactly, and says why: a final batch norm after ReLU, a widening linear pair, a zero-range feature', () => {
    const rng = new SeededRng(9);
    const norm = wideZscoreOf(rng, 10);
    if (norm.method !== 'zscore' || !norm.std) throw new Error('zscore statistics expected');
    norm.std[4] = 0;
    const doc = docOf(10, [randomDense(rng, 10, 2, 'linear'), randomDense(rng, 2, 10, 'relu'), randomBatchNorm(rng, 10)], norm);
    const { doc: folded, steps } = foldModel(doc);
    expect(folded.layers).toHaveLength(3);
    expect(folded.normalise).not.toBeNull();
    const byStep = Object.fromEntries(steps.map((s) => [s.step, s]));
    expect(byStep.normalisation).toMatchObject({ folded: false });
    expect(byStep.normalisation.reason).toMatch(/feature 4 has zero standard deviation/);
    expect(byStep['linear-collapse']).toMatchObject({ folded: false, layers: [0, 1] });
    // 10·10 + 10 = 110 parameters against 10·2 + 2 + 2·10 + 10 = 52.
    expect(byStep['linear-collapse'].reason).toMatch(/110 parameters, more than the pair's 52/);
    expect(byStep.batchnorm).toMatchObject({ folded: false, layers: [2] });
    expect(parity(doc, folded).pass).toBe(true);
  });

  it('a wider random stack (batch norm, dropout, linear pairs) stays within float32 tolerance, with fewer layers', () => {
    const rng = new SeededRng(21);
    const doc = docOf(
      16,
      [
        randomDense(rng, 16, 64, 'linear'),
        randomDense(rng, 64, 32, 'leaky_relu'),
        randomBatchNorm(rng, 32),
        { kind: 'dropout', rate: 0.2 },
        randomDense(rng, 32, 32, 'linear'),
        randomBatchNorm(rng, 32),
        randomDense(rng, 32, 10, 'softmax'),
      ],
      wideZscoreOf(rng, 16),
    );
    const { doc: folded } = foldModel(doc);
    expect(folded.layers.length).toBeLessThan(doc.layers.length);
    const c = parity(doc, folded);
    expect(c.maxAbs).toBeLessThan(FLOAT32_TOLERANCE.abs);
    expect(c.pass).toBe(true);
  });
});
