import { describe, expect, it } from 'vitest';
import { assertParity, parityReport, randomInputs } from '../../src/check/index.js';
import { TfjsTrainer } from '../../src/engine/index.js';
import { ParityError } from '../../src/errors.js';
import { ACTIVATIONS, SeededRng, type ActivationName, type Layer, type ModelDoc, type Normalisation } from '../../src/model/index.js';
import { docOf, dropoutOf, minmaxOf, randomBatchNorm, randomDense, zscoreOf } from './helpers.js';

/** A seeded model with the given widths; batchnorm and dropout mixed in between dense layers. */
function randomModel(widths: number[], activation: ActivationName, norm: 'zscore' | 'minmax' | null, seed: number): ModelDoc {
  const rng = new SeededRng(seed);
  const layers: Layer[] = [];
  for (let i = 1; i < widths.length; i++) {
    const last = i === widths.length - 1;
    layers.push(randomDense(rng, widths[i - 1], widths[i], activation));
    if (!last && i % 2 === 1) layers.push(randomBatchNorm(rng, widths[i]));
    if (!last) layers.push(dropoutOf(0.3));
  }
  const normalise: Normalisation | null = norm === 'zscore' ? zscoreOf(rng, widths[0]) : norm === 'minmax' ? minmaxOf(rng, widths[0]) : null;
  return docOf(widths[0], layers, normalise);
}

const shapes = [
  [3, 8, 2],
  [20, 64, 64, 5],
  [100, 256, 10],
];

const cases = shapes.flatMap((widths, s) =>
  ACTIVATIONS.map((activation, a) => ({ widths, activation, norm: (['zscore', 'minmax', null] as const)[(s + a) % 3], seed: 100 * s + a })),
);

// Common practice: a float32 path matches a float64 path to within a float32 tolerance
// (stated and explained in src/check/tolerance.ts).
describe('parity of the engine with the float64 reference', () => {
  it.each(cases)('$widths with $activation, normalisation $norm', ({ widths, activation, norm, seed }) => {
    const doc = randomModel(widths, activation, norm, seed);
    const rows = 64;
    const report = parityReport(doc, randomInputs(doc, rows, seed + 1), rows);
    expect(report.layers.map((l) => l.kind)).toEqual(doc.layers.map((l) => l.kind));
    expect(report.pass, JSON.stringify(report.output)).toBe(true);
    expect(report.output.rows).toBe(rows);
    expect(report.output.topClassAgreement).toBe(widths[widths.length - 1] > 1 ? 1 : null);
    expect(() => assertParity(report)).not.toThrow();
  });

  it('fails when one engine weight is corrupted after upload (the check can fail)', () => {
    const doc = randomModel([20, 64, 64, 5], 'relu', 'zscore', 7);
    const tampered: ModelDoc = { ...doc, layers: doc.layers.map((l) => (l.kind === 'dense' ? { ...l, weight: l.weight.slice() } : l)) };
    const session = new TfjsTrainer(tampered);
    try {
      const x = randomInputs(doc, 64, 8);
      expect(parityReport(doc, x, 64, { runner: session }).pass).toBe(true);
      const firstDense = tampered.layers[0];
      if (firstDense.kind !== 'dense') throw new Error('unreachable');
      firstDense.weight[5] += 0.05; // input 0 -> unit 5
      session.refreshWeights(0);
      const report = parityReport(doc, x, 64, { runner: session });
      expect(report.pass).toBe(false);
      expect(report.layers[0].pass).toBe(false);
      expect(report.layers[0].worstCol).toBe(5);
      expect(() => assertParity(report)).toThrow(ParityError);
    } finally {
      session.dispose();
    }
  });

  it('a single-output model has no top-class agreement', () => {
    const doc = randomModel([4, 6, 1], 'sigmoid', null, 9);
    const report = parityReport(doc, randomInputs(doc, 10, 1), 10);
    expect(report.output.topClassAgreement).toBeNull();
    expect(report.pass).toBe(true);
  });
});

describe('randomInputs', () => {
  it('draws around the zscore statistics: sample mean within 4 standard errors (common practice)', () => {
    const rng = new SeededRng(3);
    const doc = docOf(3, [randomDense(rng, 3, 2, 'linear')], zscoreOf(rng, 3));
    const rows = 4000;
    const x = randomInputs(doc, rows, 5);
    const norm = doc.normalise;
    if (norm?.method !== 'zscore' || !norm.mean || !norm.std) throw new Error('unreachable');
    for (let c = 0; c < 3; c++) {
      let s = 0;
      for (let r = 0; r < rows; r++) s += x[r * 3 + c];
      expect(Math.abs(s / rows - norm.mean[c])).toBeLessThan((4 * norm.std[c]) / Math.sqrt(rows));
    }
  });

  it('stays inside [min, max] for minmax statistics', () => {
    const rng = new SeededRng(4);
    const doc = docOf(2, [randomDense(rng, 2, 2, 'linear')], minmaxOf(rng, 2));
    const x = randomInputs(doc, 500, 6);
    const norm = doc.normalise;
    if (norm?.method !== 'minmax' || !norm.min || !norm.max) throw new Error('unreachable');
    for (let i = 0; i < x.length; i++) {
      expect(x[i]).toBeGreaterThanOrEqual(Math.fround(norm.min[i % 2]) - 1e-6);
      expect(x[i]).toBeLessThanOrEqual(Math.fround(norm.max[i % 2]) + 1e-6);
    }
  });
});
