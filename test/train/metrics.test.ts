import { describe, it, expect } from 'vitest';
import { Matrix } from 'ml-matrix';
import { accuracy, argmaxRows, confusionMatrix, meanAbsoluteError, predictedClasses, rootMeanSquaredError } from '../../src/train/metrics.js';

describe('metrics (src/train/metrics.ts)', () => {
  it('accuracy and confusion matrix (rows = true class, columns = predicted; definition)', () => {
    const predicted = Int32Array.of(0, 1, 1, 2, 2, 2);
    const target = Int32Array.of(0, 1, 2, 2, 2, 0);
    expect(accuracy(predicted, target)).toBe(4 / 6);
    const m = confusionMatrix(predicted, target, 3);
    expect(m).toEqual([
      [1, 0, 1],
      [0, 1, 0],
      [0, 1, 2],
    ]);
    // The trace of the confusion matrix counts the hits.
    expect(new Matrix(m).trace()).toBe(4);
  });
  it('argmax per row and a 0.5 threshold for one output', () => {
    expect([...argmaxRows(Float64Array.of(0.1, 0.9, 0.7, 0.3), 2, 2)]).toEqual([1, 0]);
    expect([...predictedClasses(Float64Array.of(0.2, 0.8), 2, 1)]).toEqual([0, 1]);
  });
  it('MAE and RMSE (definitions)', () => {
    expect(meanAbsoluteError([1, 2], [0, 4])).toBe(1.5);
    expect(rootMeanSquaredError([0, 0], [3, 4])).toBe(Math.sqrt(12.5));
  });
});
