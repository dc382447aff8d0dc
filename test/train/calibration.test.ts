/**
 * Temperature scaling and the expected calibration error (Guo, Pleiss, Sun and Weinberger, "On
 * Calibration of Modern Neural Networks", ICML 2017): ECE over M = 15 equal-width bins of the
 * top probability, sum over bins of (|B_m| / n) |acc(B_m) - conf(B_m)|; T fitted by minimising
 * hold-out NLL; the top class never changes.
 */
import { describe, expect, it } from 'vitest';
import { denseSpec, docOf } from '../fixtures/models.js';
import { SeededRng } from '../../src/model/index.js';
import { referenceForward, referenceLogits, toMat64 } from '../../src/reference/index.js';
import { classLogits, expectedCalibrationError, fitTemperature, meanNll, scaledSoftmax } from '../../src/train/calibration.js';
import { tune } from '../../src/train/tune.js';

describe('expected calibration error', () => {
  it('matches a hand-worked example, including a confidence on a bin edge', () => {
    // Six rows, three classes; bin width 1/15 = 0.0667, bins are (lower, upper].
    //   row  probabilities        label  top  conf  correct  bin
    //   1    0.97 0.02 0.01       0      0    0.97  yes      (0.9333, 1]
    //   2    0.03 0.95 0.02       0      1    0.95  no       (0.9333, 1]
    //   3    0.62 0.30 0.08       0      0    0.62  yes      (0.6, 0.6667]
    //   4    0.25 0.55 0.20       0      1    0.55  no       (0.5333, 0.6]
    //   5    0.40 0.35 0.25       0      0    0.40  yes      (0.3333, 0.4]   <- 0.4 = 6/15 is an upper edge
    //   6    0.45 0.30 0.25       1      0    0.45  no       (0.4, 0.4667]
    // Bin (0.9333, 1]: acc 1/2, conf 0.96, weight 2/6 -> (2/6)(0.46) = 0.92/6
    // Bins with one row each: |1 - 0.62| = 0.38, |0 - 0.55| = 0.55, |1 - 0.40| = 0.60, |0 - 0.45| = 0.45, each /6
    // ECE = (0.92 + 0.38 + 0.55 + 0.60 + 0.45) / 6 = 2.9 / 6 = 0.48333...
    // (Had 0.40 fallen into the next bin with 0.45, that bin would give (2/6)|0.5 - 0.425| and ECE = 2.0 / 6.)
    const probs = Float64Array.of(0.97, 0.02, 0.01, 0.03, 0.95, 0.02, 0.62, 0.3, 0.08, 0.25, 0.55, 0.2, 0.4, 0.35, 0.25, 0.45, 0.3, 0.25);
    const labels = Int32Array.of(0, 0, 0, 0, 0, 1);
    expect(expectedCalibrationError(probs, 6, 3, labels)).toBeCloseTo(2.9 / 6, 12);
  });

  it('is 0 for a perfectly calibrated bin: 10 rows at confidence 0.7, 7 of them right (hand-worked)', () => {
    const probs = new Float64Array(20);
    const labels = new Int32Array(10);
    for (let r = 0; r < 10; r++) {
      probs[r * 2] = 0.7;
      probs[r * 2 + 1] = 0.3;
      labels[r] = r < 7 ? 0 : 1;
    }
    expect(expectedCalibrationError(probs, 10, 2, labels)).toBeCloseTo(0, 12);
  });
});

describe('temperature scaling', () => {
  const rows = 400;
  const classes = 4;
  // Over-confident logits: the true class leads by a margin drawn around 1, then everything is
  // scaled by 5, so the model says ~99% where it is right about 70% of the time (invented data
  // for a property check: the property, not the values, is the published fact).
  const rng = new SeededRng(11);
  const logits = new Float64Array(rows * classes);
  const labels = new Int32Array(rows);
  for (let r = 0; r < rows; r++) {
    labels[r] = Math.floor(rng.next() * classes);
    for (let c = 0; c < classes; c++) logits[r * classes + c] = 5 * (rng.normal() + (c === labels[r] ? 1.2 : 0));
  }

  it('never changes a top class, for any T > 0', () => {
    const top = (p: Float64Array, r: number) => {
      let best = 0;
      for (let c = 1; c < classes; c++) if (p[r * classes + c] > p[r * classes + best]) best = c;
      return best;
    };
    const base = scaledSoftmax(logits, rows, classes, 1);
    for (const t of [0.05, 0.5, 2, 17]) {
      const p = scaledSoftmax(logits, rows, classes, t);
      for (let r = 0; r < rows; r++) expect(top(p, r)).toBe(top(base, r));
    }
  });

  it('fits T > 1 on over-confident logits, at the NLL minimum, and lowers NLL and ECE', () => {
    const fit = fitTemperature(logits, rows, classes, labels);
    expect(fit.temperature).toBeGreaterThan(1);
    expect(fit.atBound).toBe(false);
    expect(fit.nllAfter).toBeLessThan(fit.nllBefore);
    expect(fit.eceAfter).toBeLessThan(fit.eceBefore);
    // A minimum: 1% either side is no better (common practice for checking a 1-D optimiser).
    expect(meanNll(logits, rows, classes, labels, fit.temperature * 1.01)).toBeGreaterThan(fit.nllAfter);
    expect(meanNll(logits, rows, classes, labels, fit.temperature / 1.01)).toBeGreaterThan(fit.nllAfter);
  });

  it('a single sigmoid output is the two-class softmax of [0, z]', () => {
    const z = Float64Array.of(-2, 0.5, 3);
    const { logits: two, classes: k } = classLogits(z, 3, 1);
    expect(k).toBe(2);
    const p = scaledSoftmax(two, 3, 2, 1.5);
    z.forEach((v, r) => expect(p[r * 2 + 1]).toBeCloseTo(1 / (1 + Math.exp(-v / 1.5)), 14));
  });
});

describe('tune with calibrate', () => {
  // Invented rows for a property check (the published fact: T divides the logits before the sigmoid).
  const rng = new SeededRng(3);
  const rows = 200;
  const x = Float32Array.from({ length: rows * 2 }, () => rng.normal());
  const y = Int32Array.from({ length: rows }, (_, r) => (x[r * 2] + 0.5 * x[r * 2 + 1] + 0.8 * rng.normal() > 0 ? 1 : 0));

  it('a single sigmoid output gets a temperature: the model then answers sigmoid(z / T)', async () => {
    const res = await tune(
      docOf(2, [denseSpec(8, 'tanh'), denseSpec(1, 'sigmoid')]),
      { x, rows, y },
      { epochs: 30, batch: 16, lr: 0.01, seed: 1, holdout: 0.3, calibrate: true },
    );
    const t = res.doc.temperature!;
    expect(t).toBe(res.calibration!.temperature);
    const z = referenceLogits(res.doc, x, rows);
    const p = referenceForward(res.doc, toMat64(x, rows, 2)).y.data;
    for (let r = 0; r < rows; r += 17) expect(p[r]).toBeCloseTo(1 / (1 + Math.exp(-z[r] / t)), 6);
  });

  it('stores no temperature when every hold-out row is right (the NLL keeps falling as T -> 0, no minimum inside the range)', async () => {
    const easy = Int32Array.from({ length: rows }, (_, r) => (x[r * 2] > 0 ? 1 : 0));
    const res = await tune(
      docOf(2, [denseSpec(1, 'sigmoid')]),
      { x, rows, y: easy },
      { epochs: 200, batch: 16, lr: 0.1, seed: 1, holdout: 0.3, calibrate: true },
    );
    expect(res.history.at(-1)!.holdout!.accuracy).toBe(1);
    expect(res.calibration!.atBound).toBe(true);
    expect(res.calibration!.temperature).toBeLessThan(0.011);
    expect(res.doc.temperature).toBeUndefined();
  });

  it('is refused for regression targets and without hold-out rows (TuneConfigError, exit 2)', async () => {
    const values = Float32Array.from({ length: rows }, (_, r) => x[r * 2]);
    await expect(tune(docOf(2, [denseSpec(1, 'linear')]), { x, rows, y: values }, { epochs: 1, holdout: 0.3, calibrate: true })).rejects.toThrow(
      /calibrate: a temperature applies to a softmax or sigmoid output layer/,
    );
    await expect(tune(docOf(2, [denseSpec(1, 'sigmoid')]), { x, rows, y }, { epochs: 1, calibrate: true })).rejects.toThrow(
      /calibrate: fitting a temperature needs hold-out rows/,
    );
  });
});
