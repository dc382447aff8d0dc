/**
 * Regression targets scaled inside the model (src/model/target-scaling.ts): the stored mean and
 * standard deviation are folded into the last dense layer wherever a model runs, the file keeps
 * them (field 10, format 2.0), and tune fits, keeps or attaches them.
 */
import { describe, expect, it } from 'vitest';
import { denseOf, docOf, randomDense, denseSpec } from '../fixtures/models.js';
import { openRunner, useEngine, wasmSimdAvailable } from '../../src/engine/index.js';
import { ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel } from '../../src/format/index.js';
import { SeededRng, attachTargetScaling, foldTargetScaling, validateModel, type ModelDoc } from '../../src/model/index.js';
import { mat64 } from '../../src/model/index.js';
import { referenceForward } from '../../src/reference/index.js';
import { cloneDoc, tune } from '../../src/train/tune.js';

/** 2 inputs -> 1 linear output, W = [[0.5], [-1]], b = [0.25]; answers = z x 10 + 100. */
function scaledDoc(): ModelDoc {
  return { ...docOf(2, [denseOf([0.5, -1], [0.25], 'linear')]), targetScaling: { mean: Float64Array.of(100), std: Float64Array.of(10) } };
}

describe('target scaling: y = z·std + mean folded into the last dense layer', () => {
  it('every runner gives the answer in target units: x = [2, 1] gives z = 0.25, y = 102.5 (hand-computed)', async () => {
    const doc = scaledDoc();
    const x = Float32Array.of(2, 1);
    expect(referenceForward(doc, mat64(1, 2, Float64Array.from(x))).y.data[0]).toBeCloseTo(102.5, 10);
    await useEngine('js');
    const runner = openRunner(doc, 'js');
    expect(runner.run(x, 1)[0]).toBeCloseTo(102.5, 4);
    runner.dispose();
    if (wasmSimdAvailable()) expect(openRunner(doc, 'fast').run(x, 1)[0]).toBeCloseTo(102.5, 4);
    // The document itself is never changed by a runner.
    expect(Array.from((doc.layers[0] as { weight: Float32Array }).weight)).toEqual([0.5, -1]);
    expect(doc.targetScaling).toBeTruthy();
  });

  it('the fold is W·s and b·s + m per output column, and removes the scaling', () => {
    const rng = new SeededRng(4);
    const layer = randomDense(rng, 3, 2, 'linear');
    const doc: ModelDoc = { ...docOf(3, [layer]), targetScaling: { mean: Float64Array.of(5, -7), std: Float64Array.of(2, 0.5) } };
    const folded = foldTargetScaling(doc);
    expect(folded.targetScaling).toBeUndefined();
    const f = folded.layers[0] as typeof layer;
    for (let i = 0; i < 6; i++) expect(f.weight[i]).toBe(Math.fround(layer.weight[i] * [2, 0.5][i % 2]));
    expect(Array.from(f.bias)).toEqual([Math.fround(layer.bias[0] * 2 + 5), Math.fround(layer.bias[1] * 0.5 - 7)]);
    // Without a scaling the same document object comes back: training sessions share its arrays.
    const plain = docOf(3, [layer]);
    expect(foldTargetScaling(plain)).toBe(plain);
  });

  it('attaching a scaling to a model that already answers in target units leaves its answers unchanged', () => {
    const rng = new SeededRng(5);
    const doc = docOf(3, [randomDense(rng, 3, 8, 'relu'), randomDense(rng, 8, 2, 'linear')]);
    const x = mat64(
      4,
      3,
      Float64Array.from({ length: 12 }, () => rng.normal()),
    );
    const before = referenceForward(doc, x).y.data;
    const work = cloneDoc(doc);
    attachTargetScaling(work, { mean: Float64Array.of(120, -3), std: Float64Array.of(40, 0.25) });
    const after = referenceForward(work, x).y.data;
    for (let i = 0; i < before.length; i++) expect(after[i]).toBeCloseTo(before[i], 4);
  });

  it('the file keeps it (field 10, written as format 2.0: a 1.x reader must refuse it); a model without it is still written and read as 1.0', () => {
    const doc = scaledDoc();
    const bytes = encodeModel(doc);
    const back = decodeModel(bytes, 'scaled.tdn');
    expect(back.version).toEqual({ major: 2, minor: 0 });
    expect(Array.from(back.doc.targetScaling!.mean)).toEqual([100]);
    expect(Array.from(back.doc.targetScaling!.std)).toEqual([10]);
    const plain = decodeModel(encodeModel({ ...doc, targetScaling: null }), 'plain.tdn');
    expect(plain.version).toEqual({ major: 1, minor: 0 });
    expect(plain.doc.targetScaling).toBeUndefined();
  });

  it('is refused on an output that is not a linear dense layer, and with a standard deviation of 0', () => {
    const rng = new SeededRng(6);
    const softmax: ModelDoc = { ...docOf(2, [randomDense(rng, 2, 2, 'softmax')]), targetScaling: { mean: Float64Array.of(0, 0), std: Float64Array.of(1, 1) } };
    expect(() => validateModel(softmax, 'softmax.tdn')).toThrow(/targetScaling: target scaling needs a last dense layer with a linear activation/);
    const flat: ModelDoc = { ...scaledDoc(), targetScaling: { mean: Float64Array.of(1), std: Float64Array.of(0) } };
    expect(() => encodeModel(flat)).not.toThrow(); // encoding writes what it is given; reading checks
    expect(() => decodeModel(encodeModel(flat), 'flat.tdn')).toThrow(ModelFileError);
    expect(() => decodeModel(encodeModel(flat), 'flat.tdn')).toThrow(/target_scaling\.std: values must be finite and > 0 \(element 0 is 0\)/);
  });
});

describe('tune and target scaling', () => {
  const data = (rows: number, seed: number) => {
    const rng = new SeededRng(seed);
    const x = Float32Array.from({ length: rows * 2 }, () => rng.normal());
    // A line in the hundreds: y = 200 + 50 x0 - 30 x1 (invented for this check).
    const y = Float32Array.from({ length: rows }, (_, r) => 200 + 50 * x[2 * r] - 30 * x[2 * r + 1]);
    return { x, rows, y };
  };

  it('fits mean and population sd of the training targets for a fresh regression model; scaleTargets false adds none', async () => {
    const d = data(64, 1);
    const res = await tune(docOf(2, [denseSpec(1, 'linear')]), d, { epochs: 1, path: 'reference' });
    const mean = d.y.reduce((a, b) => a + b, 0) / 64;
    const sd = Math.sqrt(d.y.reduce((a, b) => a + (b - mean) ** 2, 0) / 64);
    expect(res.doc.targetScaling!.mean[0]).toBeCloseTo(mean, 4);
    expect(res.doc.targetScaling!.std[0]).toBeCloseTo(sd, 4);
    const off = await tune(docOf(2, [denseSpec(1, 'linear')]), d, { epochs: 1, path: 'reference', scaleTargets: false });
    expect(off.doc.targetScaling ?? null).toBeNull();
  });

  it('plain SGD learns the line in target units (hold-out RMSE under 1 against a target sd near 58); raw-target divergence is the diabetes check in test/realdata', async () => {
    const d = data(256, 2);
    const res = await tune(docOf(2, [denseSpec(1, 'linear')]), d, { epochs: 60, batch: 16, optimizer: 'sgd', lr: 0.1, holdout: 0.25, path: 'reference' });
    expect(res.history.at(-1)!.holdout!.rmse!).toBeLessThan(1);
  });

  it('a fine-tune keeps the stored scaling exactly', async () => {
    const d = data(64, 3);
    const first = await tune(docOf(2, [denseSpec(1, 'linear')]), d, { epochs: 2, path: 'reference' });
    const again = await tune(first.doc, data(64, 4), { epochs: 2, path: 'reference' });
    expect(Array.from(again.doc.targetScaling!.mean)).toEqual(Array.from(first.doc.targetScaling!.mean));
    expect(Array.from(again.doc.targetScaling!.std)).toEqual(Array.from(first.doc.targetScaling!.std));
  });
});
