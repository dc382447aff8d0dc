import { describe, it, expect } from 'vitest';
import { computeLoss, lossFor, type LossSpec, type Targets } from '../../src/train/losses.js';
import { seededRng } from './seeded.js';

/** Central differences in float64 (common practice: relative error well under 1e-6). */
function numericGrad(f: (z: Float64Array) => number, z: Float64Array, h = 1e-6): Float64Array {
  const g = new Float64Array(z.length);
  for (let i = 0; i < z.length; i++) {
    const zp = z.slice();
    const zm = z.slice();
    zp[i] += h;
    zm[i] -= h;
    g[i] = (f(zp) - f(zm)) / (2 * h);
  }
  return g;
}

const rng = seededRng(11);
const rows = 4;
const cols = 3;
const logits = Float64Array.from({ length: rows * cols }, () => rng.next() * 4 - 2);
const probs = Float64Array.from({ length: rows * cols }, () => 0.05 + 0.9 * rng.next());
const values = Float64Array.from({ length: rows * cols }, () => rng.next());
const classes: Targets = { kind: 'classes', classes: Int32Array.of(0, 2, 1, 2) };
const valueTargets: Targets = { kind: 'values', values };

const cases: [string, LossSpec, Float64Array, Targets][] = [
  ['cross_entropy from logits', { name: 'cross_entropy', input: 'logits' }, logits, classes],
  ['binary_cross_entropy from logits', { name: 'binary_cross_entropy', input: 'logits' }, logits, valueTargets],
  ['binary_cross_entropy from probabilities', { name: 'binary_cross_entropy', input: 'outputs' }, probs, valueTargets],
  ['mse', { name: 'mse', input: 'outputs' }, logits, valueTargets],
  ['half_sse', { name: 'half_sse', input: 'outputs' }, logits, valueTargets],
];

describe('losses (src/train/losses.ts)', () => {
  it.each(cases)('%s: analytic gradient matches central finite differences in float64 (common practice)', (_n, spec, input, targets) => {
    const analytic = computeLoss(spec, input, rows, cols, targets).grad;
    const numeric = numericGrad((z) => computeLoss(spec, z, rows, cols, targets).value, input);
    let worst = 0;
    for (let i = 0; i < analytic.length; i++) {
      worst = Math.max(worst, Math.abs(analytic[i] - numeric[i]) / Math.max(1e-3, Math.abs(numeric[i])));
    }
    expect(worst).toBeLessThan(1e-6);
  });

  it('cross-entropy of logits stays exact where a naive softmax overflows (log-sum-exp; common practice)', () => {
    // -log softmax([1000, 0])_1 = log(1 + e^1000) - 0 ~= 1000 exactly in float64.
    const r = computeLoss({ name: 'cross_entropy', input: 'logits' }, Float64Array.of(1000, 0), 1, 2, {
      kind: 'classes',
      classes: Int32Array.of(1),
    });
    expect(r.value).toBe(1000);
    expect([...r.grad]).toEqual([1, -1]);
    // Equal logits over two classes: loss ln 2 (definition of cross-entropy).
    const even = computeLoss({ name: 'cross_entropy', input: 'logits' }, Float64Array.of(3, 3), 1, 2, { kind: 'classes', classes: Int32Array.of(0) });
    expect(even.value).toBeCloseTo(Math.LN2, 14);
  });

  it('binary cross-entropy from logits equals the textbook -(t log p + (1-t) log(1-p)) (common practice: the textbook definition)', () => {
    const z = Float64Array.of(-30, -1, 0.5, 40);
    const t = Float64Array.of(1, 0, 1, 0);
    const r = computeLoss({ name: 'binary_cross_entropy', input: 'logits' }, z, 1, 4, { kind: 'values', values: t });
    const p = (v: number) => 1 / (1 + Math.exp(-v));
    // Direct formula; for z = -30, 40 the wrong-side loss is ~|z| (log(1 + e^|z|)), written so it stays exact.
    const manual = [30 + Math.log1p(Math.exp(-30)), -Math.log(1 - p(-1)), -Math.log(p(0.5)), 40 + Math.log1p(Math.exp(-40))];
    expect(r.value).toBeCloseTo(manual.reduce((a, b) => a + b) / 4, 12);
  });

  it('half_sse reproduces E_total = 0.298371109 of the step-by-step backpropagation example (Mazur 2015)', () => {
    const out = Float64Array.of(0.75136507, 0.772928465);
    const r = computeLoss({ name: 'half_sse', input: 'outputs' }, out, 1, 2, { kind: 'values', values: Float64Array.of(0.01, 0.99) });
    expect(r.value).toBeCloseTo(0.298371109, 8);
    // Mazur 2015: dE/dout_o1 = 0.74136507.
    expect(r.grad[0]).toBeCloseTo(0.74136507, 8);
  });

  it('mse averages over rows and outputs (common practice: the mean over every element)', () => {
    const r = computeLoss({ name: 'mse', input: 'outputs' }, Float64Array.of(1, 2, 3, 4), 2, 2, { kind: 'values', values: Float64Array.of(0, 0, 0, 0) });
    expect(r.value).toBe((1 + 4 + 9 + 16) / 4);
    expect([...r.grad]).toEqual([0.5, 1, 1.5, 2]);
  });

  it('picks the loss from the output activation, with an override', () => {
    expect(lossFor('softmax')).toEqual({ name: 'cross_entropy', input: 'logits' });
    expect(lossFor('sigmoid')).toEqual({ name: 'binary_cross_entropy', input: 'logits' });
    expect(lossFor('linear')).toEqual({ name: 'mse', input: 'outputs' });
    expect(lossFor('tanh')).toEqual({ name: 'mse', input: 'outputs' });
    expect(lossFor('sigmoid', 'half_sse')).toEqual({ name: 'half_sse', input: 'outputs' });
    expect(lossFor('linear', 'binary_cross_entropy')).toEqual({ name: 'binary_cross_entropy', input: 'outputs' });
  });
});
