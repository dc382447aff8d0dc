// Its own file: tfjs has one global backend per process, and vitest runs each file in its own
// forked process, so switching to wasm here cannot disturb the js-engine suites.
import * as tf from '@tensorflow/tfjs-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { parityReport, randomInputs, withinTolerance } from '../../src/check/index.js';
import { TfjsTrainer, engineFallbackReason, useEngine } from '../../src/engine/index.js';
import { ACTIVATIONS, SeededRng, type Layer } from '../../src/model/index.js';
import { referenceBackwardTape, referenceForwardTrain, toMat64 } from '../../src/reference/index.js';
import { trainingContext } from './helpers.js';
import { denseOf, docOf, dropoutOf, minmaxOf, randomBatchNorm, randomDense, zscoreOf } from '../fixtures/models.js';

describe('wasm engine', () => {
  beforeAll(async () => {
    expect(await useEngine('wasm')).toBe('wasm');
  });
  afterAll(async () => {
    await useEngine('js');
  });

  it('runs on the wasm backend', () => {
    expect(tf.getBackend()).toBe('wasm');
  });

  it('Mazur 2015 worked example forward pass on wasm (Mazur 2015)', () => {
    const doc = docOf(2, [denseOf([0.15, 0.25, 0.2, 0.3], [0.35, 0.35], 'sigmoid'), denseOf([0.4, 0.5, 0.45, 0.55], [0.6, 0.6], 'sigmoid')]);
    const session = new TfjsTrainer(doc);
    const y = session.run(Float32Array.of(0.05, 0.1), 1);
    session.dispose();
    expect(Math.abs(y[0] - 0.75136507)).toBeLessThan(1e-6);
    expect(Math.abs(y[1] - 0.772928465)).toBeLessThan(1e-6);
  });

  // Common practice: a float32 path matches a float64 path within a float32 tolerance.
  it.each([...ACTIVATIONS])('parity with the float64 reference, %s, batchnorm and dropout mixed in', (activation) => {
    const rng = new SeededRng(activation.length + 300);
    const layers: Layer[] = [
      randomDense(rng, 20, 64, activation),
      randomBatchNorm(rng, 64),
      dropoutOf(0.3),
      randomDense(rng, 64, 64, activation),
      randomDense(rng, 64, 5, activation),
    ];
    const doc = docOf(20, layers, activation.length % 2 ? zscoreOf(rng, 20) : minmaxOf(rng, 20));
    const report = parityReport(doc, randomInputs(doc, 128, 3), 128);
    expect(report.pass, JSON.stringify(report.output)).toBe(true);
  });

  it('training forward and backward on wasm agree with the float64 tape, and free their tensors', () => {
    const rng = new SeededRng(77);
    const doc = docOf(4, [randomDense(rng, 4, 6, 'relu'), randomBatchNorm(rng, 6), dropoutOf(0.5), randomDense(rng, 6, 2, 'linear')]);
    const session = new TfjsTrainer(doc);
    const before = tf.memory().numTensors;
    const x = Float32Array.from({ length: 20 }, () => rng.normal());
    const dy = Float32Array.from({ length: 10 }, () => rng.normal());
    const ctx = trainingContext(1);
    const f = session.forwardTrain(x, 5, ctx);
    const g = session.backward(f.tape, dy);
    expect(tf.memory().numTensors).toBe(before);
    session.dispose();

    const ref = referenceForwardTrain(doc, toMat64(x, 5, 4), ctx);
    const back = referenceBackwardTape(doc, ref.tape, toMat64(dy, 5, 2));
    f.y.forEach((v, i) => expect(withinTolerance(v, ref.y.data[i]), `y[${i}]`).toBe(true));
    g.dx.forEach((v, i) => expect(withinTolerance(v, back.dx.data[i]), `dx[${i}]`).toBe(true));
    g.grads.forEach((list, li) =>
      list.forEach((t, pi) => t.forEach((v, i) => expect(withinTolerance(v, back.grads[li][pi][i]), `grads[${li}][${pi}][${i}]`).toBe(true))),
    );
  });

  it('a session refuses to run after the process switched backend', async () => {
    const session = new TfjsTrainer(docOf(1, [denseOf([1], [0], 'linear')]));
    await useEngine('js');
    try {
      expect(() => session.run(Float32Array.of(1), 1)).toThrow(/backend 'wasm'.*now runs 'cpu'/);
    } finally {
      await useEngine('wasm');
      session.dispose();
    }
  });

  it("'auto' picks wasm here and reports no fallback", async () => {
    expect(await useEngine('auto')).toBe('wasm');
    expect(engineFallbackReason()).toBeNull();
  });
});
