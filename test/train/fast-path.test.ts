import { describe, it, expect } from 'vitest';
import { wasmSimdAvailable } from '../../src/engine/fast/dense-kernel.js';
import { DivergenceError, TuneConfigError } from '../../src/errors.js';
import { mat64 } from '../../src/model/index.js';
import type { DenseLayer, Layer, ModelDoc } from '../../src/model/types.js';
import { referenceForward } from '../../src/reference/index.js';
import { computeLoss } from '../../src/train/losses.js';
import { TuneDivergence, tune, type TuneRunOptions } from '../../src/train/tune.js';
import { denseSpec, docOf } from '../fixtures/models.js';
import { normals, seededRng } from './seeded.js';

/** Invented, seeded: one Gaussian blob per class in `features` dimensions. */
function blobs(rows: number, features: number, classes: number, seed: number) {
  const rng = seededRng(seed);
  const noise = normals(rng, rows * features);
  const x = new Float32Array(rows * features);
  const y = new Int32Array(rows);
  for (let r = 0; r < rows; r++) {
    y[r] = r % classes;
    for (let c = 0; c < features; c++) x[r * features + c] = noise[r * features + c] + (c % classes === y[r] ? 2 : 0);
  }
  return { x, rows, y };
}

const weightsOf = (doc: ModelDoc) => doc.layers.flatMap((l) => (l.kind === 'dense' ? [...l.weight, ...l.bias] : []));

/** Largest |a - b| over the largest |b|. */
function relativeGap(a: readonly number[], b: readonly number[]): number {
  let worst = 0;
  let scale = 0;
  b.forEach((v, i) => {
    worst = Math.max(worst, Math.abs(a[i] - v));
    scale = Math.max(scale, Math.abs(v));
  });
  return worst / Math.max(scale, 1e-30);
}

const batchnorm = (): Layer => ({
  kind: 'batchnorm',
  gamma: new Float32Array(0),
  beta: new Float32Array(0),
  runningMean: new Float32Array(0),
  runningVariance: new Float32Array(0),
  epsilon: 1e-5,
  momentum: 0.9,
});

describe('the fast training path (src/train/tune.ts on src/engine/fast/simd-trainer.ts)', () => {
  it('is the default for a dense model when WebAssembly SIMD is there, and the tfjs engine otherwise', async () => {
    const res = await tune(docOf(3, [denseSpec(4, 'relu'), { kind: 'dropout', rate: 0.2 }, denseSpec(2, 'softmax')]), blobs(20, 3, 2, 1), { epochs: 1 });
    expect(res.path).toBe(wasmSimdAvailable() ? 'fast' : 'engine');
    expect(res.diagnostics.some((d) => d.code === 'engine_fallback')).toBe(false);
  });

  it('a model with batch normalisation asked for "fast" trains on the engine and says why', async () => {
    const data = blobs(24, 3, 2, 2);
    const res = await tune(docOf(3, [denseSpec(4, 'relu'), batchnorm(), denseSpec(2, 'softmax')]), data, { epochs: 2, lr: 0.05, seed: 1, path: 'fast' });
    expect(res.path).toBe('engine');
    const fallback = res.diagnostics.find((d) => d.code === 'engine_fallback');
    expect(fallback?.message).toMatch(/layers\[1\] is batchnorm/);
    expect(fallback?.hint).toMatch(/dense and dropout/);
    // It did train: the batch loss fell and the running statistics moved.
    expect(res.history).toHaveLength(2);
    expect(res.history[1].batchLoss).toBeLessThan(res.history[0].batchLoss);
    const bn = res.doc.layers[1];
    expect(bn.kind === 'batchnorm' && [...bn.runningMean].some((m) => Math.abs(m) > 1e-3)).toBe(true);
    // Without an explicit ask, the engine is chosen quietly.
    const quiet = await tune(docOf(3, [denseSpec(4, 'relu'), batchnorm(), denseSpec(2, 'softmax')]), data, { epochs: 1 });
    expect(quiet.path).toBe('engine');
    expect(quiet.diagnostics.some((d) => d.code === 'engine_fallback')).toBe(false);
  });

  it('refuses an unknown path with a TuneConfigError naming the option', async () => {
    const opts = { path: 'gpu' } as unknown as TuneRunOptions;
    await expect(tune(docOf(3, [denseSpec(2, 'softmax')]), blobs(6, 3, 2, 3), opts)).rejects.toThrow(TuneConfigError);
    await expect(tune(docOf(3, [denseSpec(2, 'softmax')]), blobs(6, 3, 2, 3), opts)).rejects.toThrow(/path: must be one of fast, engine, reference/);
  });

  it('repeats bit for bit from the seed with dropout, Adam, hold-out and replay (common practice)', async () => {
    const data = blobs(80, 5, 3, 4);
    const spec = () => docOf(5, [denseSpec(16, 'relu'), { kind: 'dropout', rate: 0.3 }, denseSpec(8, 'tanh'), denseSpec(3, 'softmax')]);
    const opts: TuneRunOptions = { epochs: 3, batch: 8, seed: 5, holdout: 0.25, replay: blobs(10, 5, 3, 5), replayPerBatch: 2, path: 'fast' };
    const a = await tune(spec(), data, opts);
    const b = await tune(spec(), data, opts);
    const c = await tune(spec(), data, { ...opts, seed: 6 });
    expect(a.path).toBe('fast');
    expect(weightsOf(a.doc)).toEqual(weightsOf(b.doc));
    expect(a.history.map((h) => [h.batchLoss, h.holdout!.loss])).toEqual(b.history.map((h) => [h.batchLoss, h.holdout!.loss]));
    expect(weightsOf(a.doc)).not.toEqual(weightsOf(c.doc));
  });

  // The whole loop against the float64 reference path: the same seeded masks, shuffles and
  // replay rows, so float32 rounding is the only difference (from memory: float32 keeps ~7 digits).
  const wholeRuns: [string, TuneRunOptions][] = [
    [
      'momentum (Nesterov), decoupled decay, clipping, anchor, a frozen tensor',
      { optimizer: 'momentum', nesterov: true, lr: 0.05, weightDecay: 0.01, clip: 0.5, anchor: 0.1, freezeTensors: ['layers[3].bias'] },
    ],
    ['Adam, l2 decay, a frozen layer, replay', { optimizer: 'adam', lr: 0.01, weightDecay: 0.001, decayMode: 'l2', freeze: [0], replayPerBatch: 0.5 }],
  ];
  it.each(wholeRuns)('agrees with the float64 reference path through a whole run: %s', async (_name, extra) => {
    const data = blobs(48, 4, 3, 6);
    const parent = (
      await tune(docOf(4, [denseSpec(12, 'relu'), { kind: 'dropout', rate: 0.25 }, denseSpec(6, 'softplus'), denseSpec(3, 'softmax')]), data, {
        epochs: 1,
        path: 'reference',
      })
    ).doc;
    const opts: TuneRunOptions = { epochs: 3, batch: 8, seed: 7, holdout: 0.25, replay: extra.replayPerBatch ? blobs(12, 4, 3, 8) : undefined, ...extra };
    const fast = await tune(parent, data, { ...opts, path: 'fast' });
    const ref = await tune(parent, data, { ...opts, path: 'reference' });
    expect(fast.path).toBe('fast');
    expect(relativeGap(weightsOf(fast.doc), weightsOf(ref.doc))).toBeLessThan(1e-4);
    expect(weightsOf(fast.doc)).not.toEqual(weightsOf(parent));
    fast.history.forEach((h, e) => {
      const r = ref.history[e];
      expect(h.batchLoss).toBeCloseTo(r.batchLoss, 5);
      expect(h.holdout!.loss).toBeCloseTo(r.holdout!.loss, 5);
      expect(h.anchorPenalty).toBeCloseTo(r.anchorPenalty, 7);
      expect(Object.keys(h.gradientNorms)).toEqual(Object.keys(r.gradientNorms));
      for (const l of Object.keys(r.gradientNorms)) expect(h.gradientNorms[Number(l)] / r.gradientNorms[Number(l)]).toBeCloseTo(1, 4);
      expect(h.deadRelu).toEqual(r.deadRelu);
    });
  });

  it('frozen layers and tensors keep their exact values', async () => {
    const data = blobs(20, 3, 2, 9);
    const start = (await tune(docOf(3, [denseSpec(4, 'relu'), denseSpec(2, 'softmax')]), data, { epochs: 1 })).doc;
    const { doc, path } = await tune(start, data, { epochs: 2, lr: 0.1, path: 'fast', freeze: [0], freezeTensors: ['layers[1].bias'] });
    expect(path).toBe('fast');
    const [a0, a1] = start.layers as DenseLayer[];
    const [b0, b1] = doc.layers as DenseLayer[];
    expect([...b0.weight, ...b0.bias]).toEqual([...a0.weight, ...a0.bias]);
    expect([...b1.bias]).toEqual([...a1.bias]);
    expect([...b1.weight]).not.toEqual([...a1.weight]);
  });

  it('early stopping restores the weights of the best hold-out epoch (checked on the float64 reference forward)', async () => {
    // Invented, seeded: noise targets, so a wide net overfits and the hold-out loss turns upward.
    const rng = seededRng(10);
    const make = (rows: number) => ({ x: Float32Array.from(normals(rng, rows * 3)), rows, y: Float32Array.from(normals(rng, rows)) });
    const train = make(16);
    const hold = make(16);
    const res = await tune(docOf(3, [denseSpec(32, 'tanh'), denseSpec(1, 'linear')]), train, {
      epochs: 200,
      batch: 16,
      lr: 0.03,
      path: 'fast',
      holdoutData: hold,
      stopAfter: 5,
    });
    expect(res.path).toBe('fast');
    expect(res.stoppedEarly).toBe(true);
    const losses = res.history.map((h) => h.holdout!.loss);
    expect(res.bestEpoch).toBe(losses.indexOf(Math.min(...losses)));
    expect(res.history.length - 1 - res.bestEpoch).toBe(5);
    const y = referenceForward(res.doc, mat64(16, 3, Float64Array.from(hold.x))).y;
    // The loss is on the scaled targets (the default for regression); the RMSE is in target units,
    // so the reference forward (which undoes the scaling) must reproduce it.
    expect(res.doc.targetScaling).toBeTruthy();
    const again = computeLoss({ name: 'mse', input: 'outputs' }, y.data, 16, 1, { kind: 'values', values: hold.y }).value;
    expect(Math.sqrt(again)).toBeCloseTo(res.history[res.bestEpoch].holdout!.rmse!, 5);
  });

  it('a float32 overflow stops the run, names the top layer whose gradient is not finite and keeps the last good weights', async () => {
    const doc = docOf(2, [
      { kind: 'dense', size: 3, activation: 'relu', alpha: 0, weight: new Float32Array(6).fill(3e38), bias: new Float32Array(3) },
      { kind: 'dense', size: 2, activation: 'softmax', alpha: 0, weight: Float32Array.of(1, -1, 1, -1, 1, -1), bias: new Float32Array(2) },
    ]);
    // Inputs of 10 push 3e38 * 10 past float32's largest value (about 3.4e38, IEEE 754).
    const data = { x: Float32Array.of(10, 10, 10, 10), rows: 2, y: Int32Array.of(0, 1) };
    const caught = await tune(doc, data, { epochs: 1, batch: 2, path: 'fast' }).then(
      () => null,
      (e: unknown) => e,
    );
    expect(caught).toBeInstanceOf(DivergenceError);
    const err = caught as TuneDivergence;
    expect(err.message).toMatch(/layers\[1\] \(dense\)/);
    expect(weightsOf(err.lastGood)).toEqual(weightsOf(doc));
  });

  it('a huge learning rate throws DivergenceError with finite last good weights', async () => {
    const rng = seededRng(11);
    const data = { x: Float32Array.from(normals(rng, 40, 0, 10)), rows: 20, y: Float32Array.from(normals(rng, 20, 0, 100)) };
    const caught = await tune(docOf(2, [denseSpec(8, 'linear'), denseSpec(1, 'linear')]), data, {
      epochs: 50,
      batch: 20,
      optimizer: 'sgd',
      lr: 1e6,
      path: 'fast',
    }).then(
      () => null,
      (e: unknown) => e,
    );
    expect(caught).toBeInstanceOf(DivergenceError);
    expect((caught as Error).message).toMatch(/layers\[\d\] \(dense\)|the loss/);
    expect(weightsOf((caught as TuneDivergence).lastGood).every(Number.isFinite)).toBe(true);
  });

  it('stops after the current batch when aborted', async () => {
    const controller = new AbortController();
    let batches = 0;
    const res = await tune(
      docOf(3, [denseSpec(2, 'softmax')]),
      blobs(40, 3, 2, 12),
      { epochs: 3, batch: 4, path: 'fast' },
      {
        signal: controller.signal,
        onBatch: () => {
          if (++batches === 3) controller.abort();
        },
      },
    );
    expect(res.aborted).toBe(true);
    expect(res.path).toBe('fast');
    expect(batches).toBe(3);
    expect(res.history).toHaveLength(0);
  });

  it('reports dying ReLU units from the fast evaluation (all units of a layer with a huge negative bias)', async () => {
    const data = blobs(30, 2, 2, 13);
    const start = (await tune(docOf(2, [denseSpec(6, 'relu'), denseSpec(2, 'softmax')]), data, { epochs: 1, path: 'reference' })).doc;
    const dead = start.layers[0] as DenseLayer;
    dead.bias.fill(-1e6);
    const res = await tune(start, data, { epochs: 1, lr: 1e-6, path: 'fast' });
    expect(res.history[0].deadRelu[0]).toBe(1);
    expect(res.diagnostics.find((d) => d.code === 'dead_relu')).toMatchObject({ layer: 0 });
  });
});
