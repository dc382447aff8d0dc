import * as tf from '@tensorflow/tfjs-core';
import { afterAll, describe, expect, it } from 'vitest';
import { TfjsTrainer } from '../../src/engine/index.js';
import { SeededRng, type Layer } from '../../src/model/index.js';
import { docOf, dropoutOf, randomBatchNorm, randomDense, trainingContext, zscoreOf } from './helpers.js';

// Tensor hygiene: tfjs frees memory only on dispose, so every call must leave the live tensor
// count where it found it (common practice for tfjs code).
const rng = new SeededRng(11);
const layers: Layer[] = [randomDense(rng, 6, 16, 'relu'), randomBatchNorm(rng, 16), dropoutOf(0.25), randomDense(rng, 16, 4, 'softmax')];
const doc = docOf(6, layers, zscoreOf(rng, 6));
const session = new TfjsTrainer(doc, { chunkRows: 4096 });
afterAll(() => session.dispose());

const inputs = (rows: number) => Float32Array.from({ length: rows * 6 }, () => rng.normal());

describe('tensor hygiene', () => {
  it('numTensors is unchanged after 1000 run calls', () => {
    const x = inputs(8);
    session.run(x, 8);
    const before = tf.memory().numTensors;
    for (let i = 0; i < 1000; i++) session.run(x, 8);
    expect(tf.memory().numTensors).toBe(before);
  });

  it('a run larger than chunkRows equals running in one go, and frees everything', () => {
    const x = inputs(10_000);
    const whole = new TfjsTrainer(doc, { chunkRows: 10_000 });
    try {
      const before = tf.memory().numTensors;
      const chunked = session.run(x, 10_000);
      expect(tf.memory().numTensors).toBe(before);
      // Rows are independent at inference, so chunking must not change a single bit.
      expect(chunked).toEqual(whole.run(x, 10_000));
      expect(chunked.length).toBe(10_000 * 4);
    } finally {
      whole.dispose();
    }
  });

  it('runTensor leaves only its result, which the caller disposes', () => {
    const x = tf.tensor2d(inputs(5), [5, 6]);
    const before = tf.memory().numTensors;
    const y = session.runTensor(x);
    expect(tf.memory().numTensors).toBe(before + 1);
    expect(Array.from(y.dataSync())).toEqual(Array.from(session.run(x.dataSync() as Float32Array, 5)));
    y.dispose();
    x.dispose();
    expect(tf.memory().numTensors).toBe(before - 1);
  });

  it('runLayers, forwardTrain + backward, and disposeTape free everything', () => {
    const x = inputs(12);
    const before = tf.memory().numTensors;
    session.runLayers(x, 12);
    const f = session.forwardTrain(x, 12, trainingContext(5));
    expect(tf.memory().numTensors).toBeGreaterThan(before); // the tape holds tensors until backward
    session.backward(f.tape, new Float32Array(12 * 4).fill(0.1));
    const g = session.forwardTrain(x, 12, trainingContext(6));
    session.disposeTape(g.tape);
    expect(tf.memory().numTensors).toBe(before);
  });

  it('refreshWeights swaps tensors without leaking, and dispose frees the session', () => {
    const before = tf.memory().numTensors;
    session.refreshWeights();
    session.refreshWeights(0);
    expect(tf.memory().numTensors).toBe(before);
    const extra = new TfjsTrainer(doc);
    expect(tf.memory().numTensors).toBeGreaterThan(before);
    extra.dispose();
    expect(tf.memory().numTensors).toBe(before);
    expect(() => extra.run(inputs(1), 1)).toThrow(/disposed/);
  });

  it('refuses input of the wrong length with a ShapeError naming the shapes', () => {
    expect(() => session.run(new Float32Array(7), 2)).toThrow(/input has shape \[7\], expected \[2 x 6 = 12 values\]/);
  });
});
