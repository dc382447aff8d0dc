/**
 * Losses and their gradients, in float64 on the host.
 *
 * Each loss takes the network's last values (`logits` = pre-activation z for the
 * cross-entropies, the activated outputs for the squared errors) as a rows x cols matrix and
 * returns the loss value and dLoss/d(those values).
 *
 * Engine choice: the tune loop downloads the last layer's pre-activation from the tfjs engine,
 * computes loss and gradient here and uploads dz. Output widths are small (a handful of
 * classes or targets), so the copy costs little, and one float64 implementation serves both
 * the engine and the reference path: the loss can never disagree between them.
 *
 * Conventions (documented because they change the gradient's scale):
 * - cross_entropy: mean over rows of -sum_j t_j log softmax(z)_j. dz = (softmax(z) - t) / rows.
 * - binary_cross_entropy: mean over rows and outputs. From logits dz = (sigmoid(z) - t) / (rows*cols).
 * - mse: mean over rows and outputs of (y - t)^2. dy = 2 (y - t) / (rows*cols).
 * - half_sse: per row, sum over outputs of 1/2 (t - y)^2, then mean over rows. dy = (y - t) / rows.
 *   For one row this is exactly the "E_total" of the step-by-step backpropagation example.
 */
import type { ActivationName } from '../model/types.js';
import { softmax } from '../model/activations/softmax.js';

export const LOSS_NAMES = ['cross_entropy', 'binary_cross_entropy', 'mse', 'half_sse'] as const;
export type LossName = (typeof LOSS_NAMES)[number];

/** Targets: class indices (one per row) or a rows x cols matrix of values. */
export type Targets = { readonly kind: 'classes'; readonly classes: Int32Array } | { readonly kind: 'values'; readonly values: Float32Array | Float64Array };

/** What the loss is computed from: the last layer's pre-activation, or its outputs. */
export type LossInput = 'logits' | 'outputs';

export interface LossSpec {
  readonly name: LossName;
  readonly input: LossInput;
}

export interface LossResult {
  /** Loss value (float64). */
  readonly value: number;
  /** dLoss/d(input), rows x cols. */
  readonly grad: Float64Array;
}

/** Probabilities are clamped this far from 0 and 1 so log() stays finite (float32 resolution near 1 is ~6e-8). */
export const PROBABILITY_CLAMP = 1e-7;

/**
 * The loss that fits an output activation, and whether it reads logits.
 * softmax -> cross-entropy from logits; sigmoid -> binary cross-entropy from logits;
 * anything else -> mean squared error on outputs. An override wins; binary cross-entropy
 * after a non-sigmoid output reads probabilities (clamped).
 *
 * @example lossFor('softmax') // { name: 'cross_entropy', input: 'logits' }
 */
export function lossFor(activation: ActivationName, override?: LossName): LossSpec {
  const name: LossName = override ?? (activation === 'softmax' ? 'cross_entropy' : activation === 'sigmoid' ? 'binary_cross_entropy' : 'mse');
  if (name === 'cross_entropy') {
    // Cross-entropy always works on logits: softmax is applied inside, stably.
    return { name, input: 'logits' };
  }
  if (name === 'binary_cross_entropy') return { name, input: activation === 'sigmoid' ? 'logits' : 'outputs' };
  return { name, input: 'outputs' };
}

/**
 * Targets as a dense rows x cols float64 matrix. Class indices become one-hot rows; with a
 * single output column a class index is the target value itself (0 or 1).
 *
 * @example targetMatrix({ kind: 'classes', classes: Int32Array.of(1) }, 1, 3) // [0, 1, 0]
 */
export function targetMatrix(targets: Targets, rows: number, cols: number): Float64Array {
  const t = new Float64Array(rows * cols);
  if (targets.kind === 'values') {
    for (let i = 0; i < rows * cols; i++) t[i] = targets.values[i];
    return t;
  }
  for (let r = 0; r < rows; r++) {
    const c = targets.classes[r];
    if (cols === 1) t[r] = c;
    else t[r * cols + c] = 1;
  }
  return t;
}

/**
 * Loss value and gradient for `spec` over a rows x cols matrix `input`.
 *
 * @example computeLoss({ name: 'mse', input: 'outputs' }, Float64Array.of(1), 1, 1, { kind: 'values', values: Float64Array.of(0) }) // { value: 1, grad: [2] }
 */
export function computeLoss(spec: LossSpec, input: Float64Array, rows: number, cols: number, targets: Targets): LossResult {
  const t = targetMatrix(targets, rows, cols);
  switch (spec.name) {
    case 'cross_entropy':
      return crossEntropyFromLogits(input, rows, cols, t);
    case 'binary_cross_entropy':
      return spec.input === 'logits' ? binaryCrossEntropyFromLogits(input, rows, cols, t) : binaryCrossEntropyFromProbabilities(input, rows, cols, t);
    case 'mse':
      return meanSquaredError(input, rows, cols, t);
    case 'half_sse':
      return halfSumSquaredError(input, rows, cols, t);
  }
}

/** Row-wise softmax in float64 (the activation's own reference forward: one definition). */
export function softmaxRows(z: Float64Array, rows: number, cols: number): Float64Array {
  return softmax.refForward(z, rows, cols, 0);
}

/**
 * Mean categorical cross-entropy from logits. log softmax(z)_j = z_j - (max + log sum exp(z - max)),
 * the log-sum-exp form, so very large or very negative logits give finite losses.
 */
export function crossEntropyFromLogits(z: Float64Array, rows: number, cols: number, t: Float64Array): LossResult {
  const grad = new Float64Array(rows * cols);
  let total = 0;
  for (let r = 0; r < rows; r++) {
    const o = r * cols;
    let max = -Infinity;
    for (let c = 0; c < cols; c++) max = Math.max(max, z[o + c]);
    let sum = 0;
    for (let c = 0; c < cols; c++) sum += Math.exp(z[o + c] - max);
    const logSumExp = max + Math.log(sum);
    for (let c = 0; c < cols; c++) {
      const logP = z[o + c] - logSumExp;
      if (t[o + c] !== 0) total -= t[o + c] * logP;
      grad[o + c] = (Math.exp(logP) - t[o + c]) / rows;
    }
  }
  return { value: total / rows, grad };
}

/**
 * Mean binary cross-entropy from logits: per element max(z, 0) - z t + log(1 + exp(-|z|)),
 * which equals -(t log p + (1 - t) log(1 - p)) with p = sigmoid(z) but never takes log(0).
 */
export function binaryCrossEntropyFromLogits(z: Float64Array, rows: number, cols: number, t: Float64Array): LossResult {
  const n = rows * cols;
  const grad = new Float64Array(n);
  let total = 0;
  for (let i = 0; i < n; i++) {
    const zi = z[i];
    total += Math.max(zi, 0) - zi * t[i] + Math.log1p(Math.exp(-Math.abs(zi)));
    const p = zi >= 0 ? 1 / (1 + Math.exp(-zi)) : Math.exp(zi) / (1 + Math.exp(zi));
    grad[i] = (p - t[i]) / n;
  }
  return { value: total / n, grad };
}

/** Mean binary cross-entropy from probabilities, clamped to [PROBABILITY_CLAMP, 1 - PROBABILITY_CLAMP]. */
export function binaryCrossEntropyFromProbabilities(p: Float64Array, rows: number, cols: number, t: Float64Array): LossResult {
  const n = rows * cols;
  const grad = new Float64Array(n);
  let total = 0;
  for (let i = 0; i < n; i++) {
    const raw = p[i];
    const pi = Math.min(1 - PROBABILITY_CLAMP, Math.max(PROBABILITY_CLAMP, raw));
    total -= t[i] * Math.log(pi) + (1 - t[i]) * Math.log(1 - pi);
    // Where the clamp is active the loss is flat in p, so no gradient flows.
    grad[i] = pi === raw ? (-t[i] / pi + (1 - t[i]) / (1 - pi)) / n : 0;
  }
  return { value: total / n, grad };
}

/** Mean over rows and outputs of (y - t)^2. */
export function meanSquaredError(y: Float64Array, rows: number, cols: number, t: Float64Array): LossResult {
  const n = rows * cols;
  const grad = new Float64Array(n);
  let total = 0;
  for (let i = 0; i < n; i++) {
    const d = y[i] - t[i];
    total += d * d;
    grad[i] = (2 * d) / n;
  }
  return { value: total / n, grad };
}

/** Per row the sum over outputs of 1/2 (t - y)^2, averaged over rows. */
export function halfSumSquaredError(y: Float64Array, rows: number, cols: number, t: Float64Array): LossResult {
  const n = rows * cols;
  const grad = new Float64Array(n);
  let total = 0;
  for (let i = 0; i < n; i++) {
    const d = y[i] - t[i];
    total += 0.5 * d * d;
    grad[i] = d / rows;
  }
  return { value: total / rows, grad };
}
