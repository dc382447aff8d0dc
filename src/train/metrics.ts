/**
 * Metrics reported each epoch: accuracy and a confusion matrix for classes, mean absolute
 * error and root mean squared error for regression. Sums are float64.
 */

/**
 * Index of the largest value in each row (the first one on ties).
 *
 * @example argmaxRows(Float64Array.of(0.1, 0.9, 0.7, 0.3), 2, 2) // Int32Array [1, 0]
 */
export function argmaxRows(values: ArrayLike<number>, rows: number, cols: number): Int32Array {
  const out = new Int32Array(rows);
  for (let r = 0; r < rows; r++) {
    let best = 0;
    for (let c = 1; c < cols; c++) if (values[r * cols + c] > values[r * cols + best]) best = c;
    out[r] = best;
  }
  return out;
}

/**
 * Predicted classes from an output matrix: argmax for several outputs, threshold 0.5 for a single
 * sigmoid output (`threshold` is applied to the output value, so pass 0 when the values are logits).
 */
export function predictedClasses(values: ArrayLike<number>, rows: number, cols: number, threshold = 0.5): Int32Array {
  if (cols > 1) return argmaxRows(values, rows, cols);
  const out = new Int32Array(rows);
  for (let r = 0; r < rows; r++) out[r] = values[r] > threshold ? 1 : 0;
  return out;
}

/**
 * Share of rows whose predicted class equals the target.
 *
 * @example accuracy(Int32Array.of(1, 0), Int32Array.of(1, 1)) // 0.5
 */
export function accuracy(predicted: Int32Array, target: Int32Array): number {
  if (predicted.length === 0) return 0;
  let hits = 0;
  for (let i = 0; i < predicted.length; i++) if (predicted[i] === target[i]) hits++;
  return hits / predicted.length;
}

/**
 * classes x classes counts; row = true class, column = predicted class.
 *
 * @example confusionMatrix(Int32Array.of(1), Int32Array.of(0), 2) // [[0, 1], [0, 0]]
 */
export function confusionMatrix(predicted: Int32Array, target: Int32Array, classes: number): number[][] {
  const m = Array.from({ length: classes }, () => new Array<number>(classes).fill(0));
  for (let i = 0; i < predicted.length; i++) m[target[i]][predicted[i]]++;
  return m;
}

/**
 * Mean absolute error over every value.
 *
 * @example meanAbsoluteError(Float64Array.of(1, 2), Float64Array.of(0, 4)) // 1.5
 */
export function meanAbsoluteError(y: ArrayLike<number>, t: ArrayLike<number>): number {
  let s = 0;
  for (let i = 0; i < y.length; i++) s += Math.abs(y[i] - t[i]);
  return y.length ? s / y.length : 0;
}

/**
 * Root mean squared error over every value.
 *
 * @example rootMeanSquaredError(Float64Array.of(0, 0), Float64Array.of(3, 4)) // sqrt(12.5)
 */
export function rootMeanSquaredError(y: ArrayLike<number>, t: ArrayLike<number>): number {
  let s = 0;
  for (let i = 0; i < y.length; i++) s += (y[i] - t[i]) ** 2;
  return y.length ? Math.sqrt(s / y.length) : 0;
}
