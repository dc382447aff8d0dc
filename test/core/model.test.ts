import { describe, expect, it } from 'vitest';
import { ModelFileError } from '../../src/errors.js';
import { fisherYates, initDense, modelWidths, outputWidth, SeededRng, validateModel, type ActivationName, type ModelDoc } from '../../src/model/index.js';
import { denseOf, docOf, dropoutOf, randomBatchNorm, randomDense } from '../fixtures/models.js';

function problemsOf(doc: ModelDoc): string[] {
  try {
    validateModel(doc, 'm.tdn');
  } catch (err) {
    if (err instanceof ModelFileError) return err.problems.map((p) => `${p.where}: ${p.message}`);
    throw err;
  }
  return [];
}

describe('validateModel', () => {
  const rng = new SeededRng(1);
  const good = () => docOf(3, [randomDense(rng, 3, 4, 'relu'), randomBatchNorm(rng, 4), dropoutOf(0.2), randomDense(rng, 4, 2, 'softmax')]);

  it('accepts a consistent model and reports its widths', () => {
    const doc = good();
    expect(problemsOf(doc)).toEqual([]);
    expect(modelWidths(doc)).toEqual([3, 4, 4, 4, 2]);
    expect(outputWidth(doc)).toBe(2);
  });

  it('collects every problem in one error, naming layer, kind and tensor', () => {
    const doc = good();
    const l0 = doc.layers[0];
    if (l0.kind !== 'dense') throw new Error('unreachable');
    l0.weight = new Float32Array(5); // expected 3 x 4
    const bn = doc.layers[1];
    if (bn.kind !== 'batchnorm') throw new Error('unreachable');
    bn.runningVariance[2] = -1;
    doc.layers[2] = dropoutOf(1);
    const last = doc.layers[3];
    if (last.kind !== 'dense') throw new Error('unreachable');
    last.bias[1] = Number.NaN;
    doc.labels = ['a', 'b', 'c'];
    doc.features = ['x'];
    const problems = problemsOf(doc);
    expect(problems).toEqual(
      expect.arrayContaining([
        expect.stringMatching(/^layers\[0\] \(dense\): weight has 5 values, expected \[3, 4\] = 12/),
        expect.stringMatching(/^layers\[1\] \(batchnorm\): runningVariance\[2\] is -1/),
        expect.stringMatching(/^layers\[2\] \(dropout\): rate must be in \[0, 1\)/),
        expect.stringMatching(/^layers\[3\] \(dense\): bias\[1\] is NaN/),
        expect.stringMatching(/^features: has 1 names, expected one per input \(3\)/),
      ]),
    );
    expect(() => validateModel(doc, 'm.tdn')).toThrow(/^m\.tdn: /);
  });

  it('finds a width mismatch between layers', () => {
    const doc = docOf(3, [randomDense(rng, 3, 4, 'relu'), denseOf(new Array(10).fill(0), [0, 0], 'linear')]);
    expect(problemsOf(doc)).toEqual([expect.stringMatching(/^layers\[1\] \(dense\): weight has 10 values, expected \[4, 2\] = 8/)]);
  });

  it('checks normalisation lengths and label count', () => {
    const doc = good();
    doc.normalise = { method: 'minmax', min: Float64Array.of(0, 0), max: Float64Array.of(1, 1, 1), count: 3 };
    doc.labels = ['only one'];
    const problems = problemsOf(doc);
    expect(problems).toContainEqual(expect.stringMatching(/^normalise \(minmax\): min has 2 values, expected one per input \(3\)/));
    expect(problems).toContainEqual(expect.stringMatching(/^labels: has 1 names, expected one per output \(2\)/));
  });
});

describe('SeededRng and fisherYates', () => {
  it('the same seed gives the same stream; different seeds differ', () => {
    const a = new SeededRng(5);
    const b = new SeededRng(5);
    const c = new SeededRng(6);
    const xs = Array.from({ length: 20 }, () => a.next());
    expect(Array.from({ length: 20 }, () => b.next())).toEqual(xs);
    expect(Array.from({ length: 20 }, () => c.next())).not.toEqual(xs);
    expect(xs.every((v) => v >= 0 && v < 1)).toBe(true);
  });

  it('uniform draws have mean 1/2 and variance 1/12 (common practice), within 5 standard errors', () => {
    const rng = new SeededRng(9);
    const n = 100_000;
    const xs = Array.from({ length: n }, () => rng.next());
    const mean = xs.reduce((s, v) => s + v, 0) / n;
    const variance = xs.reduce((s, v) => s + (v - mean) ** 2, 0) / n;
    expect(Math.abs(mean - 0.5)).toBeLessThan(5 * Math.sqrt(1 / 12 / n));
    expect(Math.abs(variance - 1 / 12)).toBeLessThan(0.002);
  });

  it('normal() has mean 0, variance 1 and about 68.3% within one sd (common practice)', () => {
    const rng = new SeededRng(10);
    const n = 100_000;
    const xs = Array.from({ length: n }, () => rng.normal());
    const mean = xs.reduce((s, v) => s + v, 0) / n;
    const variance = xs.reduce((s, v) => s + (v - mean) ** 2, 0) / n;
    expect(Math.abs(mean)).toBeLessThan(5 / Math.sqrt(n));
    expect(Math.abs(variance - 1)).toBeLessThan(0.02);
    expect(Math.abs(xs.filter((v) => Math.abs(v) < 1).length / n - 0.6827)).toBeLessThan(0.005);
  });

  it('fisherYates is a permutation, and every position is equally likely for each element (common practice)', () => {
    const rng = new SeededRng(11);
    const n = 5;
    const counts = Array.from({ length: n }, () => new Array(n).fill(0));
    const trials = 50_000;
    for (let t = 0; t < trials; t++) {
      const p = fisherYates(n, rng);
      expect([...p].sort()).toEqual([0, 1, 2, 3, 4]);
      p.forEach((v, pos) => counts[v][pos]++);
    }
    // Each cell is Binomial(trials, 1/5): sd ≈ 89, so ±500 is more than 5 sd.
    for (const row of counts) for (const c of row) expect(Math.abs(c - trials / n)).toBeLessThan(500);
  });
});

describe('initDense', () => {
  it.each([
    ['relu', 2 / 200, 'He et al. 2015: variance 2 / fan_in'],
    ['leaky_relu', 2 / 200, 'He et al. 2015'],
    ['softplus', 2 / 200, 'He et al. 2015 (ReLU family, our choice)'],
    ['tanh', 2 / (200 + 100), 'Glorot and Bengio 2010: variance 2 / (fan_in + fan_out)'],
    ['sigmoid', 2 / (200 + 100), 'Glorot and Bengio 2010'],
    ['linear', 2 / (200 + 100), 'Glorot and Bengio 2010'],
  ] as [ActivationName, number, string][])('%s weights have variance %f (%s), zero biases', (activation, variance) => {
    const layer = initDense(200, 100, activation, new SeededRng(12));
    const w = layer.weight;
    const mean = w.reduce((s, v) => s + v, 0) / w.length;
    const v = w.reduce((s, x) => s + (x - mean) ** 2, 0) / w.length;
    // 20 000 draws: the sample variance is within ~3% of the true one with overwhelming probability.
    expect(Math.abs(v / variance - 1)).toBeLessThan(0.05);
    expect(layer.bias.every((b) => b === 0)).toBe(true);
    expect(layer.weight.length).toBe(200 * 100);
  });
});
