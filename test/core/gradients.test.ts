/**
 * Backward passes against central finite differences in float64 (common practice: a central
 * difference (f(x+h) - f(x-h)) / 2h agrees with the analytic gradient to relative error < 1e-6),
 * and the engine's backward against the reference's within float32 tolerance.
 *
 * Parameters are float32 in the model, so the checked values are multiples of 2^-8 below 4 in
 * magnitude and the step is h = 2^-14: w ± h is then exactly representable in float32, and the
 * difference quotient sees the step it was given.
 */
import * as tf from '@tensorflow/tfjs-core';
import { describe, expect, it } from 'vitest';
import { withinTolerance } from '../../src/check/index.js';
import { ensureEngine } from '../../src/engine/index.js';
import {
  ACTIVATIONS,
  layerKind,
  mat64,
  SeededRng,
  type ActivationName,
  type BackwardOptions,
  type ForwardContext,
  type Layer,
  type Mat64,
} from '../../src/model/index.js';
import { trainingContext } from './helpers.js';
import { dropoutOf, randomBatchNorm } from '../fixtures/models.js';

ensureEngine();

const H = 2 ** -14;
const quantise = (v: number) => Math.max(-3.9, Math.min(3.9, Math.round(v * 256) / 256));

function relError(a: number, n: number): number {
  return Math.abs(a - n) / Math.max(Math.abs(a), Math.abs(n), 1e-6);
}

/** Central difference of f with respect to data[i]. */
function centralDiff(f: () => number, data: Float32Array | Float64Array, i: number): number {
  const keep = data[i];
  data[i] = keep + H;
  const up = f();
  data[i] = keep - H;
  const down = f();
  data[i] = keep;
  return (up - down) / (2 * H);
}

function expectMatchesFD(analytic: ArrayLike<number>, f: () => number, data: Float32Array | Float64Array, what: string): void {
  let worst = 0;
  for (let i = 0; i < data.length; i++) worst = Math.max(worst, relError(analytic[i], centralDiff(f, data, i)));
  expect(worst, `${what}: worst relative error`).toBeLessThan(1e-6);
}

function quantisedMatrix(rng: SeededRng, rows: number, cols: number): Mat64 {
  return mat64(
    rows,
    cols,
    Float64Array.from({ length: rows * cols }, () => quantise(rng.normal())),
  );
}

function quantisedDense(rng: SeededRng, inputs: number, units: number, activation: ActivationName): Layer {
  const q = (n: number, s: number) => Float32Array.from({ length: n }, () => quantise(s * rng.normal()));
  return { kind: 'dense', size: units, activation, alpha: 0.1, weight: q(inputs * units, 0.8), bias: q(units, 0.3) };
}

/** Loss sum(out ⊙ G); its gradient with respect to out is G. */
function weighted(out: Float64Array, g: Float64Array): number {
  let s = 0;
  for (let i = 0; i < out.length; i++) s += out[i] * g[i];
  return s;
}

/** Engine backward of one layer on the same inputs, downloaded as plain arrays. */
function engineGrads(layer: Layer, x: Mat64, g: Mat64, ctx: ForwardContext, opts: BackwardOptions = {}): { dx: Float32Array; grads: Float32Array[] } {
  const kind = layerKind(layer.kind);
  const w = kind.engine.upload(layer);
  const result = tf.tidy(() => {
    const xt = tf.tensor2d(Float32Array.from(x.data), [x.rows, x.cols]);
    const f = kind.engine.forward(layer, w, xt, ctx, 0);
    const b = kind.engine.backward(layer, w, f.saved, tf.tensor2d(Float32Array.from(g.data), [g.rows, g.cols]), opts);
    return { dx: b.dx.dataSync().slice(), grads: b.grads.map((t) => Float32Array.from(t.dataSync())) };
  });
  tf.dispose(w);
  return { dx: Float32Array.from(result.dx), grads: result.grads };
}

function expectEngineAgrees(engine: ArrayLike<number>, ref: ArrayLike<number>, what: string): void {
  expect(engine.length, what).toBe(ref.length);
  for (let i = 0; i < ref.length; i++) {
    if (!withinTolerance(engine[i], ref[i])) expect.fail(`${what}[${i}]: engine ${engine[i]} vs reference ${ref[i]}`);
  }
}

describe('dense backward against finite differences (common practice)', () => {
  const ctx = trainingContext(1);
  it.each([...ACTIVATIONS])('dense with %s: dW, db and dx', (activation) => {
    const rng = new SeededRng(activation.length * 97 + 5);
    const layer = quantisedDense(rng, 4, 3, activation);
    if (layer.kind !== 'dense') throw new Error('unreachable');
    const x = quantisedMatrix(rng, 5, 4);
    const g = mat64(
      5,
      3,
      Float64Array.from({ length: 15 }, () => rng.normal()),
    );
    const ref = layerKind('dense').reference;
    const loss = () => weighted(ref.forward(layer, x, ctx, 0).y.data, g.data);
    const back = ref.backward(layer, ref.forward(layer, x, ctx, 0).saved, g);

    expectMatchesFD(back.grads[0], loss, layer.weight, 'dW');
    expectMatchesFD(back.grads[1], loss, layer.bias, 'db');
    expectMatchesFD(back.dx.data, loss, x.data, 'dx');

    const eng = engineGrads(layer, x, g, ctx);
    expectEngineAgrees(eng.grads[0], back.grads[0], 'engine dW');
    expectEngineAgrees(eng.grads[1], back.grads[1], 'engine db');
    expectEngineAgrees(eng.dx, back.dx.data, 'engine dx');
  });

  it('dyIsPreActivation: backward from dL/dz matches finite differences of a loss on z', () => {
    const rng = new SeededRng(31);
    const layer = quantisedDense(rng, 4, 3, 'tanh');
    if (layer.kind !== 'dense') throw new Error('unreachable');
    const x = quantisedMatrix(rng, 5, 4);
    const g = mat64(
      5,
      3,
      Float64Array.from({ length: 15 }, () => rng.normal()),
    );
    const ref = layerKind('dense').reference;
    const loss = () => weighted(ref.forward(layer, x, ctx, 0).z!.data, g.data);
    const back = ref.backward(layer, ref.forward(layer, x, ctx, 0).saved, g, { dyIsPreActivation: true });
    expectMatchesFD(back.grads[0], loss, layer.weight, 'dW');
    expectMatchesFD(back.grads[1], loss, layer.bias, 'db');
    expectMatchesFD(back.dx.data, loss, x.data, 'dx');

    const eng = engineGrads(layer, x, g, ctx, { dyIsPreActivation: true });
    expectEngineAgrees(eng.grads[0], back.grads[0], 'engine dW');
    expectEngineAgrees(eng.dx, back.dx.data, 'engine dx');
  });

  it('softmax + cross-entropy: p - t handed as dL/dz equals the gradient of the cross-entropy (common practice)', () => {
    const rng = new SeededRng(32);
    const layer = quantisedDense(rng, 4, 3, 'softmax');
    if (layer.kind !== 'dense') throw new Error('unreachable');
    const x = quantisedMatrix(rng, 5, 4);
    const targets = Float64Array.from({ length: 15 }, (_, i) => (i % 3 === Math.floor(i / 3) % 3 ? 1 : 0));
    const ref = layerKind('dense').reference;
    const crossEntropy = () => {
      const p = ref.forward(layer, x, ctx, 0).y.data;
      let s = 0;
      for (let i = 0; i < p.length; i++) s -= targets[i] * Math.log(p[i]);
      return s;
    };
    const p = ref.forward(layer, x, ctx, 0);
    const dz = mat64(
      5,
      3,
      p.y.data.map((v, i) => v - targets[i]),
    );
    const back = ref.backward(layer, p.saved, dz, { dyIsPreActivation: true });
    expectMatchesFD(back.grads[0], crossEntropy, layer.weight, 'dW');
    expectMatchesFD(back.dx.data, crossEntropy, x.data, 'dx');
  });
});

describe('batchnorm backward against finite differences (common practice)', () => {
  function quantisedBatchNorm(rng: SeededRng, width: number): Layer {
    const bn = randomBatchNorm(rng, width);
    bn.gamma = bn.gamma.map(quantise);
    bn.beta = bn.beta.map(quantise);
    return bn;
  }

  it.each([
    ['training mode, through the batch statistics', trainingContext(2)],
    ['inference mode, running statistics held fixed', { training: false, dropoutMask: () => new Float32Array(0) }],
  ] as [string, ForwardContext][])('%s: dgamma, dbeta and dx', (_name, ctx) => {
    const rng = new SeededRng(ctx.training ? 41 : 42);
    const layer = quantisedBatchNorm(rng, 4);
    if (layer.kind !== 'batchnorm') throw new Error('unreachable');
    const x = quantisedMatrix(rng, 6, 4);
    const g = mat64(
      6,
      4,
      Float64Array.from({ length: 24 }, () => rng.normal()),
    );
    const ref = layerKind('batchnorm').reference;
    const loss = () => weighted(ref.forward(layer, x, ctx, 0).y.data, g.data);
    const back = ref.backward(layer, ref.forward(layer, x, ctx, 0).saved, g);
    expectMatchesFD(back.grads[0], loss, layer.gamma, 'dgamma');
    expectMatchesFD(back.grads[1], loss, layer.beta, 'dbeta');
    expectMatchesFD(back.dx.data, loss, x.data, 'dx');

    const eng = engineGrads(layer, x, g, ctx);
    expectEngineAgrees(eng.grads[0], back.grads[0], 'engine dgamma');
    expectEngineAgrees(eng.grads[1], back.grads[1], 'engine dbeta');
    expectEngineAgrees(eng.dx, back.dx.data, 'engine dx');
  });

  it('training mode returns the batch mean and biased variance on both paths (Ioffe and Szegedy 2015)', () => {
    const rng = new SeededRng(43);
    const layer = quantisedBatchNorm(rng, 3);
    if (layer.kind !== 'batchnorm') throw new Error('unreachable');
    const x = quantisedMatrix(rng, 8, 3);
    const ctx = trainingContext(3);
    const stats = layerKind('batchnorm').reference.forward(layer, x, ctx, 0).stats!;
    for (let c = 0; c < 3; c++) {
      const col = Array.from({ length: 8 }, (_, r) => x.data[r * 3 + c]);
      const mean = col.reduce((a, b) => a + b, 0) / 8;
      expect(stats.mean[c]).toBeCloseTo(mean, 12);
      expect(stats.variance[c]).toBeCloseTo(col.reduce((a, v) => a + (v - mean) ** 2, 0) / 8, 12);
    }
    const w = layerKind('batchnorm').engine.upload(layer);
    let engineStats = stats;
    tf.tidy(() => {
      engineStats = layerKind('batchnorm').engine.forward(layer, w, tf.tensor2d(Float32Array.from(x.data), [8, 3]), ctx, 0).stats!;
    });
    tf.dispose(w);
    expect(engineStats).not.toBe(stats);
    expectEngineAgrees(engineStats.mean, stats.mean, 'engine batch mean');
    expectEngineAgrees(engineStats.variance, stats.variance, 'engine batch variance');
  });
});

describe('dropout backward against finite differences (common practice)', () => {
  it('with a fixed mask: dx is dy times the mask, and the engine agrees', () => {
    const rng = new SeededRng(51);
    const layer = dropoutOf(0.5);
    const x = quantisedMatrix(rng, 6, 5);
    const g = mat64(
      6,
      5,
      Float64Array.from({ length: 30 }, () => rng.normal()),
    );
    const ctx = trainingContext(4);
    const ref = layerKind('dropout').reference;
    const loss = () => weighted(ref.forward(layer, x, ctx, 0).y.data, g.data);
    const fwd = ref.forward(layer, x, ctx, 0);
    const back = ref.backward(layer, fwd.saved, g);
    expectMatchesFD(back.dx.data, loss, x.data, 'dx');
    // Inverted dropout: every kept unit is scaled by 1/(1 - rate) = 2, the rest are 0.
    const mask = ctx.dropoutMask(0, 6, 5, 0.5);
    expect(new Set(mask)).toEqual(new Set([0, 2]));
    expectEngineAgrees(engineGrads(layer, x, g, ctx).dx, back.dx.data, 'engine dx');
  });
});
