/**
 * The walk-through of DEVELOPERS.md ("Adding an activation") made true in test code: an
 * activation registered through the catalogue alone runs on every engine, in the float64
 * reference, through training, a spec and a save and load. Nothing outside the catalogue is told.
 *
 * The toy is softsign, f(z) = z / (1 + |z|), f'(z) = 1 / (1 + |z|)² (a known activation; the
 * derivative is plain calculus). Its file code 99 is not in formats/tendon.proto: a proto3 enum
 * field keeps unknown values, so a save and load proves the codec asks the catalogue, not a list.
 */
import * as tf from '@tensorflow/tfjs-core';
import { afterAll, describe, expect, it } from 'vitest';
import { docOf, denseOf, randomDense } from '../fixtures/models.js';
import { parityReport } from '../../src/check/index.js';
import { SimdTrainer, openRunner, useEngine, wasmSimdAvailable, type RuntimeEngine } from '../../src/engine/index.js';
import { decodeModel, encodeModel } from '../../src/format/index.js';
import { SeededRng, isActivationName, mat64, modelFacts, pointwiseF32, registerActivation } from '../../src/model/index.js';
import { referenceBackwardTape, referenceForward, referenceForwardTrain, toMat64 } from '../../src/reference/index.js';
import { buildFromSpec } from '../../src/spec/spec.js';
import { trainingContext } from './helpers.js';

const softsign = (z: number): number => z / (1 + Math.abs(z));
const slope = (z: number): number => 1 / (1 + Math.abs(z)) ** 2;

const toy = registerActivation({
  name: 'softsign',
  code: 99,
  usesAlpha: false,
  init: 'glorot',
  refForward: (z) => z.map(softsign),
  refBackward: (z, _y, dy) => dy.map((d, i) => d * slope(z[i])),
  engineForward: (z) => tf.div(z, tf.add(1, tf.abs(z))),
  engineBackward: (z, _y, dy) => tf.div(dy, tf.square(tf.add(1, tf.abs(z)))),
  f32: pointwiseF32(softsign, slope),
});
afterAll(() => toy.remove());

// One identity layer: the output is softsign of the input, checkable by hand.
const identity = docOf(3, [denseOf([1, 0, 0, 0, 1, 0, 0, 0, 1], [0, 0, 0], toy.name)]);
const x = Float32Array.of(1, -3, 0, 0.5, 2, -1);
// softsign(1) = 1/2, softsign(-3) = -3/4, softsign(0.5) = 1/3, softsign(2) = 2/3, softsign(-1) = -1/2.
const byHand = [0.5, -0.75, 0, 1 / 3, 2 / 3, -0.5];

function deeperDoc(): ReturnType<typeof docOf> {
  const rng = new SeededRng(11);
  return docOf(5, [randomDense(rng, 5, 12, toy.name), randomDense(rng, 12, 7, 'relu'), randomDense(rng, 7, 3, toy.name)]);
}

describe('a toy activation registered through the catalogue alone', () => {
  it('is an activation name while registered, and not before (the hook is what adds it)', () => {
    expect(isActivationName('softsign')).toBe(true);
    expect(isActivationName('softsign2')).toBe(false);
    const plain = {
      usesAlpha: false,
      init: 'glorot' as const,
      refForward: (z: Float64Array) => z,
      refBackward: (_z: Float64Array, _y: Float64Array, dy: Float64Array) => dy,
      engineForward: (z: tf.Tensor2D) => z,
      engineBackward: (_z: tf.Tensor2D, _y: tf.Tensor2D, dy: tf.Tensor2D) => dy,
      f32: pointwiseF32(
        (z) => z,
        () => 1,
      ),
    };
    // Codes are never reused (7 is softmax's), and a name is registered once.
    expect(() => registerActivation({ ...plain, name: 'other', code: 7 })).toThrow(/code 7 is already taken/);
    expect(() => registerActivation({ ...plain, name: 'softsign', code: 100 })).toThrow(/already in the catalogue/);
  });

  it('runs in the float64 reference (values by hand)', () => {
    const y = referenceForward(identity, toMat64(x, 2, 3)).y.data;
    byHand.forEach((v, i) => expect(y[i]).toBeCloseTo(v, 12));
  });

  const engines: ('js' | 'wasm' | 'fast')[] = ['js', 'wasm', 'fast'];
  for (const engine of engines) {
    it(`runs on the ${engine} engine: values by hand, and parity with the reference per layer`, async () => {
      if (engine === 'fast' && !wasmSimdAvailable()) throw new Error('this runtime lacks WebAssembly SIMD; the fast engine cannot be tested');
      if (engine !== 'fast') await useEngine(engine);
      const runner = openRunner(identity, engine);
      try {
        expect(runner.engine).toBe(engine);
        const y = runner.run(x, 2);
        byHand.forEach((v, i) => expect(y[i]).toBeCloseTo(v, 6));
      } finally {
        runner.dispose();
      }
      const doc = deeperDoc();
      const deep = openRunner(doc, engine);
      const rows = 40;
      const input = Float32Array.from({ length: rows * 5 }, (_, i) => Math.sin(i * 1.7) * 3);
      try {
        const report = parityReport(doc, input, rows, { runner: deep });
        expect(report.pass).toBe(true);
        expect(report.layers.map((l) => l.kind)).toEqual(['dense', 'dense', 'dense']);
      } finally {
        deep.dispose();
      }
    });
  }

  it('trains on the fast kernel with the reference gradients (float32 tolerance)', () => {
    const doc = deeperDoc();
    const rows = 8;
    const input = Float32Array.from({ length: rows * 5 }, (_, i) => Math.cos(i * 0.9));
    const ctx = trainingContext(3);
    const fast = new SimdTrainer(doc, { preActivation: false });
    const f = fast.forwardTrain(input, rows, ctx);
    const dOut = Float32Array.from({ length: rows * 3 }, (_, i) => ((i % 5) - 2) / 10);
    const grads = fast.backward(f, dOut);
    const ref = referenceForwardTrain(doc, toMat64(input, rows, 5), ctx);
    const refGrads = referenceBackwardTape(doc, ref.tape, mat64(rows, 3, Float64Array.from(dOut))).grads;
    grads.forEach((layer, li) =>
      layer.forEach((g, gi) => g.forEach((v, i) => expect(Math.abs(v - refGrads[li][gi][i])).toBeLessThan(1e-5 + 1e-4 * Math.abs(refGrads[li][gi][i])))),
    );
  });

  it('survives a save and load: the file holds its code, and the loaded model gives the same outputs', async () => {
    await useEngine('js');
    const doc = deeperDoc();
    const { doc: loaded } = decodeModel(encodeModel(doc), '(toy)');
    expect(loaded.layers.map((l) => (l.kind === 'dense' ? l.activation : l.kind))).toEqual(['softsign', 'relu', 'softsign']);
    const input = Float32Array.from({ length: 4 * 5 }, (_, i) => i / 7 - 1);
    const before = openRunner(doc, 'js');
    const after = openRunner(loaded, 'js');
    expect(Array.from(after.run(input, 4))).toEqual(Array.from(before.run(input, 4)));
    before.dispose();
    after.dispose();
    expect(modelFacts(loaded, null).layers[0].detail).toBe('softsign');
  });

  it('is accepted by a spec (tendon pack), as one of the listed activations', async () => {
    const spec = { inputs: 2, layers: [{ kind: 'dense', size: 2, activation: 'softsign' }] };
    const doc = await buildFromSpec(spec, 'toy.json', { loadTensorFile: () => Promise.reject(new Error('no files')) });
    expect(doc.layers[0]).toMatchObject({ kind: 'dense', activation: 'softsign' });
    await expect(
      buildFromSpec({ inputs: 2, layers: [{ kind: 'dense', size: 2, activation: 'softsine' }] }, 'toy.json', {
        loadTensorFile: () => Promise.reject(new Error('no files')),
      }),
    ).rejects.toThrow(/softsign/);
  });
});
