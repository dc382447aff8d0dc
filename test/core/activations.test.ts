import * as tf from '@tensorflow/tfjs-core';
import { afterAll, describe, expect, it } from 'vitest';
import { TfjsRunner, ensureEngine } from '../../src/engine/index.js';
import { ACTIVATIONS, activationKind, SeededRng } from '../../src/model/index.js';
import { denseOf, docOf } from './helpers.js';

ensureEngine();

describe('activation derivatives', () => {
  const xs = Float64Array.from({ length: 41 }, (_, i) => -4 + 0.2 * i); // includes exactly 0 at i = 20
  const ones = new Float64Array(xs.length).fill(1);

  function derivative(name: 'sigmoid' | 'tanh'): Float64Array {
    const act = activationKind(name);
    const y = act.refForward(xs, 1, xs.length, 0);
    return act.refBackward(xs, y, ones, 1, xs.length, 0);
  }

  it('logistic derivative peaks at 0.25 at x = 0 (common practice)', () => {
    const d = derivative('sigmoid');
    const peak = d.indexOf(Math.max(...d));
    expect(xs[peak]).toBeCloseTo(0, 12);
    expect(d[peak]).toBeCloseTo(0.25, 15);
  });

  it("tanh's derivative peaks at 1 at x = 0 (common practice)", () => {
    const d = derivative('tanh');
    const peak = d.indexOf(Math.max(...d));
    expect(xs[peak]).toBeCloseTo(0, 12);
    expect(d[peak]).toBeCloseTo(1, 15);
  });

  it.each(['sigmoid', 'tanh'] as const)('the engine backward of %s agrees with the reference derivative (common practice)', (name) => {
    const act = activationKind(name);
    const ref = derivative(name);
    const engine = tf.tidy(() => {
      const z = tf.tensor2d(Float32Array.from(xs), [1, xs.length]);
      return act.engineBackward(z, act.engineForward(z, 0), tf.onesLike(z), 0).dataSync();
    });
    for (let i = 0; i < xs.length; i++) expect(Math.abs(engine[i] - ref[i])).toBeLessThan(1e-6);
    expect(engine[20]).toBeCloseTo(name === 'sigmoid' ? 0.25 : 1, 6);
  });

  it('ReLU derivative is 0 or 1, and leaky ReLU keeps alpha for negative inputs (common practice)', () => {
    const relu = activationKind('relu');
    const d = relu.refBackward(xs, relu.refForward(xs, 1, xs.length, 0), ones, 1, xs.length, 0);
    xs.forEach((x, i) => expect(d[i]).toBe(x > 0 ? 1 : 0));
    const leaky = activationKind('leaky_relu');
    const dl = leaky.refBackward(xs, leaky.refForward(xs, 1, xs.length, 0.1), ones, 1, xs.length, 0.1);
    xs.forEach((x, i) => expect(dl[i]).toBe(x > 0 ? 1 : 0.1));
  });

  it('softmax rows sum to 1 and survive huge logits (common practice)', () => {
    const sm = activationKind('softmax');
    const y = sm.refForward(Float64Array.of(1000, 1001, 1002, -1000, 0, 1000), 2, 3, 0);
    expect(y[0] + y[1] + y[2]).toBeCloseTo(1, 14);
    expect(y[3] + y[4] + y[5]).toBeCloseTo(1, 14);
    // exp(2)/(1+e+e²) from memory-free algebra: the shift by the max leaves the ratios intact.
    expect(y[2]).toBeCloseTo(Math.exp(2) / (1 + Math.E + Math.exp(2)), 14);
  });

  it('sigmoid and softplus stay finite and exact in the far tails (common practice)', () => {
    const z = Float64Array.of(-800, -40, 40, 800);
    const s = activationKind('sigmoid').refForward(z, 1, 4, 0);
    expect(s[0]).toBe(0);
    expect(s[1]).toBeCloseTo(Math.exp(-40), 30);
    expect(s[3]).toBe(1);
    const sp = activationKind('softplus').refForward(z, 1, 4, 0);
    expect(sp[0]).toBe(0);
    expect(sp[1]).toBeCloseTo(Math.exp(-40), 30); // log(1 + e^-40) ≈ e^-40
    expect(sp[3]).toBe(800);
  });
});

describe('IEEE 754 binary32 storage', () => {
  const n = 8;
  const identity = Array.from({ length: n * n }, (_, i) => (i % (n + 1) === 0 ? 1 : 0));
  const session = new TfjsRunner(docOf(n, [denseOf(identity, new Array(n).fill(0), 'linear')]));
  afterAll(() => session.dispose());

  it('an identity dense layer returns Math.fround of each input (IEEE 754-2008 binary32)', () => {
    const rng = new SeededRng(754);
    const doubles = Array.from({ length: 16 * n }, () => rng.normal() * 10 ** Math.floor(rng.next() * 10 - 5));
    const out = session.run(Float32Array.from(doubles), 16);
    doubles.forEach((d, i) => expect(out[i]).toBe(Math.fround(d)));
    // The rounding is real: most doubles are not representable in binary32.
    expect(doubles.filter((d, i) => out[i] !== d).length).toBeGreaterThan(doubles.length / 2);
  });
});

describe('activation catalogue', () => {
  it.each([...ACTIVATIONS])('%s is registered under its own name', (name) => {
    expect(activationKind(name).name).toBe(name);
  });
});
