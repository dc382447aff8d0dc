import { describe, expect, it } from 'vitest';
import { EngineRefusal } from '../../src/errors.js';
import { SimdTrainer, simdTrainBlocker } from '../../src/engine/fast/simd-trainer.js';
import { referenceBackwardTape, referenceForward, referenceForwardTrain, toMat64 } from '../../src/reference/index.js';
import { SeededRng, mat64, type ActivationName, type ForwardContext, type ModelDoc } from '../../src/model/index.js';
import { ACTIVATIONS } from '../../src/model/types.js';
import { denseStackDoc, seededRows } from '../../src/bench/models.js';

/** A training context whose dropout masks are drawn once per layer and replayed, so both paths see the same mask. */
function fixedMasks(seed: number): ForwardContext {
  const masks = new Map<number, Float32Array>();
  const rng = new SeededRng(seed);
  return {
    training: true,
    dropoutMask(layer, rows, cols, rate) {
      let m = masks.get(layer);
      if (!m) {
        m = Float32Array.from({ length: rows * cols }, () => (rng.next() < rate ? 0 : 1 / (1 - rate)));
        masks.set(layer, m);
      }
      return m;
    },
  };
}

/** Largest |a - b| relative to the largest |b| (float32 against float64). */
function relativeGap(a: Float32Array, b: Float64Array): number {
  let worst = 0;
  let scale = 0;
  for (let i = 0; i < b.length; i++) {
    worst = Math.max(worst, Math.abs(a[i]! - b[i]!));
    scale = Math.max(scale, Math.abs(b[i]!));
  }
  return worst / Math.max(scale, 1e-30);
}

function compare(doc: ModelDoc, rows: number, preActivation: boolean, seed: number): void {
  const x = seededRows(rows, doc.inputs, seed);
  const fast = new SimdTrainer(doc, { preActivation });
  const f = fast.forwardTrain(x, rows, fixedMasks(seed));
  const ref = referenceForwardTrain(doc, toMat64(x, rows, doc.inputs), fixedMasks(seed));
  const refOut = preActivation ? ref.z!.data : ref.y.data;
  expect(relativeGap(f.out, refOut)).toBeLessThan(1e-5);
  const dOut = seededRows(rows, f.out.length / rows, seed + 1);
  const grads = fast.backward(f, dOut);
  const refGrads = referenceBackwardTape(doc, ref.tape, mat64(rows, f.out.length / rows, Float64Array.from(dOut)), { dyIsPreActivation: preActivation }).grads;
  doc.layers.forEach((_, i) => {
    expect(grads[i]!.length).toBe(refGrads[i]!.length);
    grads[i]!.forEach((g, t) => expect(relativeGap(g, refGrads[i]![t]!)).toBeLessThan(1e-5));
  });
}

describe('SimdTrainer (own kernel) gradients against the float64 reference backward', () => {
  it.each([
    ['relu', 'softmax', true],
    ['tanh', 'linear', false],
    ['sigmoid', 'sigmoid', false],
    ['leaky_relu', 'softplus', false],
  ] satisfies [ActivationName, ActivationName, boolean][])('hidden %s, output %s (loss reads logits: %s)', (hidden, last, pre) => {
    compare(denseStackDoc([19, 37, 21, 5], 4, hidden, last), 13, pre, 3);
    compare(denseStackDoc([19, 37, 21, 5], 4, hidden, last), 64, pre, 5);
  });

  // Every activation as the hidden one and as the output (the loss reading outputs), with a dropout layer between.
  it.each(ACTIVATIONS.map((a) => [a]))('every activation: hidden %s, between dropout, output read after its activation', (act) => {
    const base = denseStackDoc([7, 12, 9, 4], 11, act, act);
    const doc: ModelDoc = { ...base, layers: [base.layers[0]!, { kind: 'dropout', rate: 0.4 }, base.layers[1]!, base.layers[2]!] };
    compare(doc, 9, false, 12);
  });

  // The loss reads the logits of the last layer (softmax + cross-entropy, sigmoid + binary cross-entropy).
  it.each([['softmax'], ['sigmoid']] as const)('last %s with the loss reading logits, every hidden activation', (last) => {
    for (const hidden of ACTIVATIONS) compare(denseStackDoc([6, 10, 3], 13, hidden, last), 8, true, 14);
  });

  it('evaluate() gives every layer in inference mode, the logits last, as the float64 reference forward does', () => {
    const base = denseStackDoc([9, 20, 4], 15, 'relu', 'softmax');
    const doc: ModelDoc = { ...base, layers: [base.layers[0]!, { kind: 'dropout', rate: 0.5 }, base.layers[1]!] };
    const rows = 300; // more than one evaluation piece
    const x = seededRows(rows, 9, 16);
    const got = new SimdTrainer(doc, { preActivation: true }).evaluate(x, rows);
    const last = base.layers[1]!;
    if (last.kind !== 'dense') throw new Error('dense expected');
    const logitsView: ModelDoc = { ...doc, layers: [doc.layers[0]!, doc.layers[1]!, { ...last, activation: 'linear' }] };
    const want = referenceForward(logitsView, toMat64(x, rows, 9), { keepLayers: true }).layers!;
    expect(got.map((l) => l.length)).toEqual([rows * 20, rows * 20, rows * 4]);
    got.forEach((l, i) => expect(relativeGap(l, want[i]!.data), `layer ${i}`).toBeLessThan(1e-5));
    // Dropout is the identity at inference.
    expect(got[1]).toEqual(got[0]);
  });

  it('refresh(layers) copies only the named layers; refresh() also takes a changed normalisation', () => {
    const doc = denseStackDoc([3, 16, 2], 17);
    const fast = new SimdTrainer(doc, { preActivation: false });
    const x = seededRows(1, 3, 18);
    const before = fast.evaluate(x, 1)[1]!.slice();
    const [first, last] = doc.layers;
    if (first!.kind !== 'dense' || last!.kind !== 'dense') throw new Error('dense expected');
    last.bias[1] += 2;
    first.bias.fill(-100); // every ReLU off, were it copied
    fast.refresh([1]);
    const after = fast.evaluate(x, 1)[1]!;
    expect(after[0]).toBe(before[0]);
    expect(after[1]! - before[1]!).toBeCloseTo(2, 5);
    doc.normalise = { method: 'minmax', min: Float64Array.of(0, 0, 0), max: Float64Array.of(2, 2, 2), count: 1 };
    fast.refresh();
    const want = referenceForward(doc, toMat64(x, 1, 3)).y.data;
    expect(relativeGap(fast.evaluate(x, 1)[1]!, want)).toBeLessThan(1e-6);
  });

  it('simdTrainBlocker names what the path cannot train, null for dense and dropout stacks', () => {
    const doc = denseStackDoc([4, 8, 2], 1);
    expect(simdTrainBlocker({ ...doc, layers: [doc.layers[0]!, { kind: 'dropout', rate: 0.1 }, doc.layers[1]!] })).toBeNull();
    expect(simdTrainBlocker({ ...doc, layers: [doc.layers[0]!, { kind: 'dropout', rate: 0.1 }] })).toMatch(/dense last layer; layers\[1\] is dropout/);
  });

  it('784-256-10 at batch 64 with dropout and z-score input normalisation', () => {
    const base = denseStackDoc([784, 256, 10], 6, 'relu', 'softmax');
    const rng = new SeededRng(2);
    const doc: ModelDoc = {
      ...base,
      layers: [base.layers[0]!, { kind: 'dropout', rate: 0.25 }, base.layers[1]!],
      normalise: {
        method: 'zscore',
        mean: Float64Array.from({ length: 784 }, () => rng.normal()),
        std: Float64Array.from({ length: 784 }, () => 0.5 + rng.next()),
        m2: null,
        count: 10,
      },
    };
    compare(doc, 64, true, 8);
  });

  it('refresh() makes a change to the document weights visible', () => {
    const doc = denseStackDoc([5, 16, 3], 1);
    const fast = new SimdTrainer(doc, { preActivation: true });
    const x = seededRows(2, 5, 1);
    const noMasks = fixedMasks(1);
    const before = fast.forwardTrain(x, 2, noMasks).out.slice();
    const last = doc.layers[1]!;
    if (last.kind !== 'dense') throw new Error('dense expected');
    last.bias[0] += 1;
    fast.refresh();
    const after = fast.forwardTrain(x, 2, noMasks).out;
    expect(after[0]! - before[0]!).toBeCloseTo(1, 5);
    expect(after[1]).toBeCloseTo(before[1]!, 6);
  });

  it('refuses batch normalisation with an EngineRefusal naming the layer, its kind and the engine', () => {
    const doc = denseStackDoc([4, 8, 2], 1);
    const bn = {
      kind: 'batchnorm' as const,
      gamma: new Float32Array(8).fill(1),
      beta: new Float32Array(8),
      runningMean: new Float32Array(8),
      runningVariance: new Float32Array(8).fill(1),
      epsilon: 1e-3,
      momentum: 0.9,
    };
    let thrown: unknown = null;
    try {
      new SimdTrainer({ ...doc, layers: [doc.layers[0]!, bn, doc.layers[1]!] }, { preActivation: true });
    } catch (error) {
      thrown = error;
    }
    expect(thrown).toBeInstanceOf(EngineRefusal);
    expect(thrown).toMatchObject({ engine: 'fast', layerIndex: 1, kind: 'batchnorm' });
    expect(String((thrown as Error).message)).toMatch(/fast engine cannot run layers\[1\] \(batchnorm\)/);
  });
});
