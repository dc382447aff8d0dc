import { describe, it, expect } from 'vitest';
import { DataError, DivergenceError } from '../../src/errors.js';
import { mat64 } from '../../src/model/index.js';
import type { DenseLayer, ModelDoc } from '../../src/model/types.js';
import { referenceForward } from '../../src/reference/index.js';
import { computeLoss } from '../../src/train/losses.js';
import { TuneDivergence, gradientsOf, tune } from '../../src/train/tune.js';
import { denseSpec, docOf, emptyZscore } from '../fixtures/models.js';
import { normals, seededRng } from './seeded.js';

/** Invented, seeded: two Gaussian blobs per class in `features` dimensions. */
function blobs(rows: number, features: number, classes: number, seed: number) {
  const rng = seededRng(seed);
  const x = new Float32Array(rows * features);
  const y = new Int32Array(rows);
  const noise = normals(rng, rows * features);
  for (let r = 0; r < rows; r++) {
    y[r] = r % classes;
    for (let c = 0; c < features; c++) x[r * features + c] = noise[r * features + c] + (c % classes === y[r] ? 2.5 : 0);
  }
  return { x, rows, y };
}

const weightsOf = (doc: ModelDoc) =>
  doc.layers.flatMap((l) =>
    l.kind === 'dense' ? [...l.weight, ...l.bias] : l.kind === 'batchnorm' ? [...l.gamma, ...l.beta, ...l.runningMean, ...l.runningVariance] : [],
  );

describe('tune loop (src/train/tune.ts)', () => {
  it.each([
    [1, 10],
    [3, 4],
    [10, 1],
  ])('batch %i over 10 rows makes ceil(n/k) = %i updates per epoch (common practice)', async (k, updates) => {
    const data = blobs(10, 3, 2, 1);
    const perEpoch: number[] = [0, 0];
    const { history } = await tune(
      docOf(3, [denseSpec(2, 'softmax')]),
      data,
      { epochs: 2, batch: k, optimizer: 'sgd', lr: 0.1, path: 'reference' },
      {
        onBatch: (p) => perEpoch[p.epoch]++,
      },
    );
    expect(perEpoch).toEqual([updates, updates]);
    expect(history.map((h) => h.updates)).toEqual([updates, updates]);
  });

  it('repeats bit for bit from the seed, with dropout and batch norm, on the engine (common practice)', async () => {
    const data = blobs(60, 4, 3, 2);
    const spec = () =>
      docOf(4, [
        denseSpec(8, 'relu'),
        {
          kind: 'batchnorm',
          gamma: new Float32Array(0),
          beta: new Float32Array(0),
          runningMean: new Float32Array(0),
          runningVariance: new Float32Array(0),
          epsilon: 1e-5,
          momentum: 0.9,
        },
        { kind: 'dropout', rate: 0.3 },
        denseSpec(3, 'softmax'),
      ]);
    const opts = { epochs: 3, batch: 8, lr: 0.01, seed: 5, holdout: 0.2 };
    const a = await tune(spec(), data, opts);
    const b = await tune(spec(), data, opts);
    const c = await tune(spec(), data, { ...opts, seed: 6 });
    expect(weightsOf(a.doc)).toEqual(weightsOf(b.doc));
    expect(a.history.map((h) => h.batchLoss)).toEqual(b.history.map((h) => h.batchLoss));
    expect(weightsOf(a.doc)).not.toEqual(weightsOf(c.doc));
    // Batch norm running statistics moved away from their start (mean 0, variance 1).
    const bn = a.doc.layers[1];
    expect(bn.kind === 'batchnorm' && [...bn.runningMean].some((m) => Math.abs(m) > 1e-3)).toBe(true);
  });

  it('records a model without a parent file as trained from its origin, in words', async () => {
    const data = blobs(20, 3, 2, 3);
    const first = await tune(docOf(3, [denseSpec(4, 'tanh'), denseSpec(2, 'softmax')], emptyZscore()), data, { epochs: 1, path: 'reference' });
    const plain = await tune(first.doc, data, { epochs: 1, path: 'reference' });
    expect(plain.doc.provenance.at(-1)).toMatchObject({ action: 'trained', source: 'a model held in memory' });
    const named = await tune(first.doc, data, { epochs: 1, path: 'reference', origin: 'spec bakery-spec.json' });
    expect(named.doc.provenance.at(-1)).toMatchObject({ action: 'trained', source: 'spec bakery-spec.json' });
  });

  it('never mutates the input document and records provenance', async () => {
    const data = blobs(20, 3, 2, 3);
    const first = await tune(docOf(3, [denseSpec(4, 'tanh'), denseSpec(2, 'softmax')], emptyZscore()), data, { epochs: 1, path: 'reference' });
    const parent = first.doc;
    const before = structuredClone(parent);
    const second = await tune(parent, data, {
      epochs: 2,
      lr: 0.05,
      path: 'reference',
      normalisation: 'continue',
      parent: { checksum: '0badf00d', source: 'a.tdn' },
    });
    expect(parent).toEqual(before);
    expect(weightsOf(second.doc)).not.toEqual(weightsOf(parent));
    expect(second.doc.provenance.at(-1)).toMatchObject({ checksum: '0badf00d', source: 'a.tdn', action: 'fine-tuned' });
    // The unfitted block was fitted from the rows; 'continue' then counted the rows again.
    expect(parent.normalise?.count).toBe(20);
    expect(second.doc.normalise?.count).toBe(40);
  });

  it('fits an empty z-score block from the training rows (Welford; mean agrees with the two-pass mean)', async () => {
    const data = blobs(30, 2, 2, 4);
    const { doc } = await tune(docOf(2, [denseSpec(2, 'softmax')], emptyZscore()), data, { epochs: 1, path: 'reference' });
    const n = doc.normalise;
    if (n?.method !== 'zscore') throw new Error('normalisation lost');
    let mean0 = 0;
    for (let r = 0; r < 30; r++) mean0 += data.x[r * 2];
    expect(n.mean![0]).toBeCloseTo(mean0 / 30, 10);
    const kept = await tune(doc, blobs(30, 2, 2, 5), { epochs: 1, path: 'reference', normalisation: 'keep' });
    expect(kept.doc.normalise).toEqual(doc.normalise);
  });

  it('frozen layers and tensors get no updates', async () => {
    const data = blobs(20, 3, 2, 6);
    const start = (await tune(docOf(3, [denseSpec(4, 'relu'), denseSpec(2, 'softmax')]), data, { epochs: 1, path: 'reference' })).doc;
    const { doc } = await tune(start, data, { epochs: 2, lr: 0.1, path: 'reference', freeze: [0], freezeTensors: ['layers[1].bias'] });
    const [a0, a1] = start.layers as DenseLayer[];
    const [b0, b1] = doc.layers as DenseLayer[];
    expect([...b0.weight, ...b0.bias]).toEqual([...a0.weight, ...a0.bias]);
    expect([...b1.bias]).toEqual([...a1.bias]);
    expect([...b1.weight]).not.toEqual([...a1.weight]);
  });

  it('the anchor penalty keeps fine-tuned weights closer to the parent', async () => {
    const data = blobs(40, 3, 2, 7);
    const parent = (await tune(docOf(3, [denseSpec(6, 'tanh'), denseSpec(2, 'softmax')]), data, { epochs: 2, path: 'reference' })).doc;
    const shifted = { ...data, y: data.y.map((c) => 1 - c) };
    const distance = (d: ModelDoc) => Math.hypot(...weightsOf(d).map((w, i) => w - weightsOf(parent)[i]));
    const free = await tune(parent, shifted, { epochs: 5, lr: 0.01, path: 'reference', seed: 1 });
    const held = await tune(parent, shifted, { epochs: 5, lr: 0.01, path: 'reference', seed: 1, anchor: 5 });
    expect(distance(held.doc)).toBeLessThan(0.5 * distance(free.doc));
    expect(held.history[0].anchorPenalty).toBeGreaterThan(0);
  });

  it('replay mixes earlier rows into every batch', async () => {
    const data = blobs(12, 3, 2, 8);
    const rows: number[] = [];
    await tune(
      docOf(3, [denseSpec(2, 'softmax')]),
      data,
      { epochs: 1, batch: 4, path: 'reference', replay: blobs(5, 3, 2, 9), replayPerBatch: 2 },
      { onBatch: (p) => rows.push(p.rows) },
    );
    expect(rows).toEqual([6, 6, 6]);
  });

  it('early stopping restores the weights of the best hold-out epoch', async () => {
    // Invented, seeded: noise targets, so a wide net overfits and the hold-out loss turns upward.
    const rng = seededRng(10);
    const make = (rows: number) => ({ x: Float32Array.from(normals(rng, rows * 3)), rows, y: Float32Array.from(normals(rng, rows)) });
    const train = make(16);
    const hold = make(16);
    const res = await tune(docOf(3, [denseSpec(32, 'tanh'), denseSpec(1, 'linear')]), train, {
      epochs: 200,
      batch: 16,
      lr: 0.03,
      path: 'reference',
      holdoutData: hold,
      stopAfter: 5,
    });
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

  it('a huge learning rate throws DivergenceError and keeps the last good weights', async () => {
    const rng = seededRng(11);
    const data = { x: Float32Array.from(normals(rng, 40, 0, 10)), rows: 20, y: Float32Array.from(normals(rng, 20, 0, 100)) };
    let caught: unknown;
    try {
      await tune(docOf(2, [denseSpec(8, 'linear'), denseSpec(1, 'linear')]), data, { epochs: 50, batch: 20, optimizer: 'sgd', lr: 1e6, path: 'reference' });
    } catch (e) {
      caught = e;
    }
    expect(caught).toBeInstanceOf(DivergenceError);
    const err = caught as TuneDivergence;
    expect(err.message).toMatch(/layers\[\d\] \(dense\)|the loss/);
    expect(weightsOf(err.lastGood).every(Number.isFinite)).toBe(true);
  });

  it('stops after the current batch when aborted', async () => {
    const controller = new AbortController();
    let batches = 0;
    const res = await tune(
      docOf(3, [denseSpec(2, 'softmax')]),
      blobs(40, 3, 2, 12),
      { epochs: 3, batch: 4, path: 'reference' },
      {
        signal: controller.signal,
        onBatch: () => {
          if (++batches === 3) controller.abort();
        },
      },
    );
    expect(res.aborted).toBe(true);
    expect(batches).toBe(3);
    expect(res.history).toHaveLength(0);
  });

  it('refuses a class the model does not know with a DataError naming the row', async () => {
    const data = { x: new Float32Array(6), rows: 3, y: Int32Array.of(0, 1, 5) };
    await expect(tune(docOf(2, [denseSpec(2, 'softmax')]), data, { path: 'reference' })).rejects.toThrow(DataError);
    await expect(tune(docOf(2, [denseSpec(2, 'softmax')]), data, { path: 'reference' })).rejects.toThrow(/:3: class 5/);
  });

  it('network gradients match central finite differences in float64 for every loss (common practice)', async () => {
    const rng = seededRng(13);
    const x = normals(rng, 5 * 3);
    const cases = [
      ['softmax', 'cross_entropy', Int32Array.of(0, 2, 1, 1, 0), 3],
      ['sigmoid', 'binary_cross_entropy', Float64Array.from({ length: 10 }, () => rng.next()), 2],
      ['linear', 'mse', normals(rng, 10), 2],
      ['tanh', 'half_sse', normals(rng, 10), 2],
    ] as const;
    for (const [activation, loss, y, outs] of cases) {
      const doc = (
        await tune(docOf(3, [denseSpec(4, 'softplus'), denseSpec(outs, activation)]), { x, rows: 5, y }, { epochs: 1, lr: 1e-9, path: 'reference', loss })
      ).doc;
      const { grads } = gradientsOf(doc, x, y, { rows: 5, loss });
      const w = (doc.layers[0] as DenseLayer).weight;
      for (const k of [0, 5, 11]) {
        const keep = w[k];
        // Step in float32-representable amounts so the perturbation is exactly what the model sees.
        const h = Math.fround(1e-3);
        w[k] = keep + h;
        const up = gradientsOf(doc, x, y, { rows: 5, loss }).loss;
        const dh = w[k] - keep;
        w[k] = keep - h;
        const down = gradientsOf(doc, x, y, { rows: 5, loss }).loss;
        const dl = keep - w[k];
        w[k] = keep;
        const numeric = (up - down) / (dh + dl);
        expect(Math.abs(grads[0][0][k] - numeric), `${loss} w[${k}]`).toBeLessThan(1e-5 * Math.max(1, Math.abs(numeric)));
      }
    }
  });
});
