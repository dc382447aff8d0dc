/**
 * Integrated gradients against the paper's axioms (Sundararajan, Taly and Yan, "Axiomatic
 * Attribution for Deep Networks", ICML 2017): on a linear function the attribution of feature i
 * is (x_i - baseline_i) · w_i exactly; attributions sum to F(x) - F(baseline) (completeness);
 * a feature the function does not depend on gets 0 (sensitivity / dummy). The input gradient
 * they integrate is held to float64 central finite differences (common practice: relative
 * error well under 1e-6).
 */
import { describe, expect, it } from 'vitest';
import { denseOf, docOf, dropoutOf, minmaxOf, randomBatchNorm, randomDense, zscoreOf } from '../fixtures/models.js';
import { completenessGaps, explainRows, integratedGradients } from '../../src/explain/index.js';
import { ACTIVATIONS, mat64, SeededRng, type ActivationName, type ModelDoc } from '../../src/model/index.js';
import { inputGradient, referenceForward } from '../../src/reference/index.js';
import { randomMatrix } from '../core/helpers.js';

/** 4 inputs -> dense 6 f -> batchnorm -> dropout -> dense 5 f -> dense 3 softmax, seeded. */
function deepDoc(activation: ActivationName, seed: number, normalise: 'zscore' | 'minmax' = 'zscore'): ModelDoc {
  const rng = new SeededRng(seed);
  const hidden: ActivationName = activation === 'softmax' ? 'softmax' : activation;
  return docOf(
    4,
    [randomDense(rng, 4, 6, hidden), randomBatchNorm(rng, 6), dropoutOf(0.3), randomDense(rng, 6, 5, hidden), randomDense(rng, 5, 3, 'softmax')],
    normalise === 'zscore' ? zscoreOf(rng, 4) : minmaxOf(rng, 4),
  );
}

/** Raw rows around the model's own statistics, so every unit sees both signs. */
function rowsNear(doc: ModelDoc, rows: number, seed: number): Float64Array {
  const rng = new SeededRng(seed);
  const z = randomMatrix(rng, rows, doc.inputs);
  const n = doc.normalise;
  return z.map((v, i) => {
    const c = i % doc.inputs;
    if (n?.method === 'zscore' && n.mean && n.std) return n.mean[c] + v * n.std[c];
    if (n?.method === 'minmax' && n.min && n.max) return n.min[c] + (0.5 + 0.3 * v) * (n.max[c] - n.min[c]);
    return v;
  });
}

describe("integrated gradients: linear model (the paper: a_i = (x_i - x'_i) w_i exactly)", () => {
  it('equals (x - baseline) · w for every feature and output, at any number of steps', () => {
    const w = [0.5, -1.25, 2, 0, 0.75, -0.5]; // [3 inputs, 2 outputs]
    const doc = docOf(3, [denseOf(w, [0.1, -0.2], 'linear')]);
    const x = Float64Array.of(1.5, -2, 0.25, 4, 0.5, -1);
    const baseline = Float64Array.of(0.5, 0.25, -1);
    for (const steps of [1, 7, 64]) {
      for (const k of [0, 1]) {
        const a = integratedGradients(doc, x, 2, baseline, Int32Array.of(k, k), steps);
        for (let r = 0; r < 2; r++) {
          for (let i = 0; i < 3; i++) {
            const wi = Math.fround(w[i * 2 + k]);
            expect(a.attributions[r * 3 + i]).toBeCloseTo((x[r * 3 + i] - baseline[i]) * wi, 12);
          }
        }
      }
    }
  });

  it('through z-score normalisation the weight seen by a raw feature is w_i / std_i', () => {
    const rng = new SeededRng(4);
    const norm = zscoreOf(rng, 3);
    const w = [0.5, -1.25, 2];
    const doc = docOf(3, [denseOf(w, [0.3], 'linear')], norm);
    const x = Float64Array.of(3, -1, 7);
    const baseline = Float64Array.from(norm.method === 'zscore' ? norm.mean! : []);
    const a = integratedGradients(doc, x, 1, baseline, Int32Array.of(0), 3).attributions;
    const std = norm.method === 'zscore' ? norm.std! : new Float64Array(3);
    for (let i = 0; i < 3; i++) expect(a[i]).toBeCloseTo(((x[i] - baseline[i]) * Math.fround(w[i])) / std[i], 12);
  });
});

describe('integrated gradients: completeness on deep models with every activation', () => {
  it.each(ACTIVATIONS.map((a) => [a]))(
    '%s hidden layers: attributions sum to score - baseline score within 1%% (of the larger of that difference and sum |a_i|)',
    (activation) => {
      const doc = deepDoc(activation, 20 + ACTIVATIONS.indexOf(activation));
      const rows = 12;
      const x = rowsNear(doc, rows, 5);
      const baseline = Float64Array.from(doc.normalise?.method === 'zscore' ? doc.normalise.mean! : new Float64Array(4));
      const e = explainRows(doc, x, rows, { output: 'top', baseline, steps: 64 });
      expect(e.overTolerance).toBe(0);
      for (let r = 0; r < rows; r++) {
        let sum = 0;
        for (let i = 0; i < 4; i++) sum += e.attributions[r * 4 + i];
        let size = 0;
        for (let i = 0; i < 4; i++) size += Math.abs(e.attributions[r * 4 + i]);
        const delta = e.score[r] - e.baselineScore[r];
        expect(Math.abs(sum - delta)).toBeLessThanOrEqual(0.01 * Math.max(Math.abs(delta), size));
      }
    },
  );

  it('on a smooth model the midpoint rule closes the gap as 1/steps² (tanh; 4x the steps, about 16x smaller)', () => {
    const doc = deepDoc('tanh', 7, 'minmax');
    const x = rowsNear(doc, 4, 9);
    const baseline = new Float64Array(4);
    const gap = (steps: number) => Math.max(...completenessGaps(integratedGradients(doc, x, 4, baseline, Int32Array.of(0, 1, 2, 0), steps), 4));
    const coarse = gap(8);
    const fine = gap(32);
    expect(fine).toBeLessThan(coarse / 8);
    expect(fine).toBeLessThan(0.01);
  });

  it('a calibrated model explains its calibrated probability (completeness holds with the temperature)', () => {
    const doc = { ...deepDoc('sigmoid', 3), temperature: 2.5 };
    const x = rowsNear(doc, 5, 2);
    const baseline = Float64Array.from(doc.normalise?.method === 'zscore' ? doc.normalise.mean! : []);
    const e = explainRows(doc, x, 5, { output: 1, baseline, steps: 64 });
    const y = referenceForward(doc, mat64(5, 4, x)).y.data;
    for (let r = 0; r < 5; r++) expect(e.score[r]).toBeCloseTo(y[r * 3 + 1], 12);
    expect(e.overTolerance).toBe(0);
  });
});

describe('integrated gradients: sensitivity and dummy (a feature the model ignores gets 0)', () => {
  it('zero first-layer weights for feature 2 give it exactly 0, though it differs from the baseline', () => {
    const doc = deepDoc('relu', 31);
    const first = doc.layers[0];
    if (first.kind !== 'dense') throw new Error('expected dense');
    for (let j = 0; j < first.size; j++) first.weight[2 * first.size + j] = 0;
    const x = rowsNear(doc, 6, 3);
    const baseline = new Float64Array(4).fill(-3);
    const e = explainRows(doc, x, 6, { output: 'top', baseline, steps: 32 });
    for (let r = 0; r < 6; r++) {
      expect(x[r * 4 + 2]).not.toBe(baseline[2]);
      expect(Math.abs(e.attributions[r * 4 + 2])).toBe(0);
    }
  });
});

describe('input gradient against central finite differences (common practice)', () => {
  it.each(ACTIVATIONS.map((a) => [a]))('%s: d output / d raw input agrees to relative 1e-6', (activation) => {
    const doc = deepDoc(activation, 40 + ACTIVATIONS.indexOf(activation));
    const rows = 5;
    const x = rowsNear(doc, rows, 8);
    const out = Int32Array.of(0, 1, 2, 0, 1);
    const { dx } = inputGradient(doc, mat64(rows, 4, x), out);
    const f = (data: Float64Array, r: number) => referenceForward(doc, mat64(rows, 4, data)).y.data[r * 3 + out[r]];
    for (let r = 0; r < rows; r++) {
      for (let i = 0; i < 4; i++) {
        const h = 1e-5 * Math.max(1, Math.abs(x[r * 4 + i]));
        const up = Float64Array.from(x);
        const down = Float64Array.from(x);
        up[r * 4 + i] += h;
        down[r * 4 + i] -= h;
        const numeric = (f(up, r) - f(down, r)) / (2 * h);
        const analytic = dx.data[r * 4 + i];
        expect(Math.abs(analytic - numeric) / Math.max(Math.abs(analytic), Math.abs(numeric), 1e-6)).toBeLessThan(1e-6);
      }
    }
  });
});
