/**
 * Batch normalisation (Ioffe and Szegedy, 2015), per feature c:
 *   inference: y = gamma (x - runningMean) / sqrt(runningVariance + eps) + beta
 *   training:  the same with this batch's mean and biased variance, returned as `stats` so the
 *              train loop can fold them into the running statistics with `momentum`.
 * Trainable: [gamma, beta]. Backward from a training forward runs through the batch
 * statistics; from an inference forward it treats the running statistics as constants.
 * Engine weights: [gamma, beta, runningMean, 1/sqrt(runningVariance + eps)].
 * Engine saved: [xhat, batchInvStd] (training) or [xhat] (inference).
 */
import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from '../tfjs-lazy.js';
import type { BatchNormLayer, ParamRef } from '../types.js';
import { storedFieldProblems, type StoredForm } from './fields.js';
import { as2D } from './engine-util.js';
import type { EngineBackward, EngineForward, ForwardContext, LayerKind, Mat64, RefBackward, RefForward } from './kind.js';
import { mat64 } from './mat64.js';

/**
 * What a batch normalisation layer stores (formats/tendon.proto, BatchNormParams), with the one
 * home of its rules: epsilon finite and > 0 (it keeps 1/sqrt(var + eps) finite); momentum in
 * [0, 1], where 1 keeps the running statistics as they are (frozen) and 0 replaces them with
 * each batch's. A spec that leaves the vectors out gets the identity (1, 0, 0, 1).
 */
const STORED = {
  output: 'in',
  fields: [
    { type: 'tensor', key: 'gamma', proto: 'gamma', spec: 'gamma', shape: ['in'], storage: 'f32', start: 1 },
    { type: 'tensor', key: 'beta', proto: 'beta', spec: 'beta', shape: ['in'], storage: 'f32', start: 0 },
    { type: 'tensor', key: 'runningMean', proto: 'running_mean', spec: 'mean', shape: ['in'], storage: 'f32', start: 0 },
    {
      type: 'tensor',
      key: 'runningVariance',
      proto: 'running_variance',
      spec: 'variance',
      shape: ['in'],
      storage: 'f32',
      start: 1,
      each: { ok: (v) => v >= 0, rule: '>= 0' },
    },
    {
      type: 'number',
      key: 'epsilon',
      proto: 'epsilon',
      spec: 'epsilon',
      rule: { ok: (v) => Number.isFinite(v) && v > 0, rule: 'a finite number > 0' },
      default: 1e-5,
    },
    { type: 'number', key: 'momentum', proto: 'momentum', spec: 'momentum', rule: { ok: (v) => v >= 0 && v <= 1, rule: 'in [0, 1]' }, default: 0.9 },
  ],
} as const satisfies StoredForm<BatchNormLayer>;

interface BatchNormSaved {
  readonly mode: 'training' | 'inference';
  readonly xhat: Float64Array;
  /** Per feature 1/sqrt(var + eps) of the statistics used. */
  readonly invStd: Float64Array;
  readonly rows: number;
  readonly cols: number;
}

function params(layer: BatchNormLayer, inputWidth: number, index: number): ParamRef[] {
  return [
    { name: `layers[${index}].gamma`, shape: [inputWidth], data: layer.gamma },
    { name: `layers[${index}].beta`, shape: [inputWidth], data: layer.beta },
  ];
}

function tensors(layer: BatchNormLayer, inputWidth: number, index: number): ParamRef[] {
  return [
    ...params(layer, inputWidth, index),
    { name: `layers[${index}].runningMean`, shape: [inputWidth], data: layer.runningMean },
    { name: `layers[${index}].runningVariance`, shape: [inputWidth], data: layer.runningVariance },
  ];
}

function refForward(layer: BatchNormLayer, x: Mat64, ctx: ForwardContext): RefForward {
  const { rows, cols } = x;
  const mean = new Float64Array(cols);
  const variance = new Float64Array(cols);
  if (ctx.training) {
    // Two passes (mean, then squared deviations) rather than E[x²] - E[x]², which cancels badly
    // when the mean is large next to the spread.
    for (let r = 0; r < rows; r++) for (let c = 0; c < cols; c++) mean[c] += x.data[r * cols + c];
    for (let c = 0; c < cols; c++) mean[c] /= rows;
    for (let r = 0; r < rows; r++) {
      for (let c = 0; c < cols; c++) {
        const d = x.data[r * cols + c] - mean[c];
        variance[c] += d * d;
      }
    }
    for (let c = 0; c < cols; c++) variance[c] /= rows;
  } else {
    mean.set(layer.runningMean);
    variance.set(layer.runningVariance);
  }
  const invStd = new Float64Array(cols);
  for (let c = 0; c < cols; c++) invStd[c] = 1 / Math.sqrt(variance[c] + layer.epsilon);
  const xhat = new Float64Array(rows * cols);
  const y = new Float64Array(rows * cols);
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) {
      const i = r * cols + c;
      xhat[i] = (x.data[i] - mean[c]) * invStd[c];
      y[i] = layer.gamma[c] * xhat[i] + layer.beta[c];
    }
  }
  const saved: BatchNormSaved = { mode: ctx.training ? 'training' : 'inference', xhat, invStd, rows, cols };
  return { y: mat64(rows, cols, y), saved, ...(ctx.training ? { stats: { mean, variance } } : {}) };
}

function isBatchNormSaved(s: unknown): s is BatchNormSaved {
  return typeof s === 'object' && s !== null && 'xhat' in s && 'invStd' in s && 'mode' in s;
}

function refBackward(layer: BatchNormLayer, saved: unknown, dy: Mat64): RefBackward {
  if (!isBatchNormSaved(saved)) throw new Error('batchnorm backward: saved is not from a batchnorm reference forward');
  const { xhat, invStd, rows, cols, mode } = saved;
  const dgamma = new Float64Array(cols);
  const dbeta = new Float64Array(cols);
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) {
      const i = r * cols + c;
      dbeta[c] += dy.data[i];
      dgamma[c] += dy.data[i] * xhat[i];
    }
  }
  const dx = new Float64Array(rows * cols);
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) {
      const i = r * cols + c;
      const g = layer.gamma[c] * invStd[c];
      // Training: mean and variance depend on every row, which adds the two correction terms
      // dx = gamma·invStd/N · (N·dy - Σdy - xhat·Σ(dy·xhat)).
      dx[i] = mode === 'training' ? (g / rows) * (rows * dy.data[i] - dbeta[c] - xhat[i] * dgamma[c]) : g * dy.data[i];
    }
  }
  return { dx: mat64(rows, cols, dx), grads: [dgamma, dbeta] };
}

/**
 * The inference form as one per-feature affine map in float64, y = scale ⊙ x + shift:
 * scale = gamma / sqrt(runningVariance + eps), shift = beta - scale ⊙ runningMean.
 * What the fast engine runs and what folding moves into a neighbouring dense layer.
 */
export function batchNormAffine(layer: BatchNormLayer): { scale: Float64Array; shift: Float64Array } {
  const n = layer.gamma.length;
  const scale = new Float64Array(n);
  const shift = new Float64Array(n);
  for (let c = 0; c < n; c++) {
    scale[c] = layer.gamma[c] / Math.sqrt(layer.runningVariance[c] + layer.epsilon);
    shift[c] = layer.beta[c] - layer.runningMean[c] * scale[c];
  }
  return { scale, shift };
}

function engineUpload(layer: BatchNormLayer): tf.Tensor[] {
  // 1/sqrt(var + eps) in float64 once, rounded to float32 once.
  const invStd = new Float32Array(layer.runningVariance.length);
  for (let c = 0; c < invStd.length; c++) invStd[c] = 1 / Math.sqrt(layer.runningVariance[c] + layer.epsilon);
  return [tfjs().tensor1d(layer.gamma.slice()), tfjs().tensor1d(layer.beta.slice()), tfjs().tensor1d(layer.runningMean.slice()), tfjs().tensor1d(invStd)];
}

function engineForward(layer: BatchNormLayer, weights: tf.Tensor[], x: tf.Tensor2D, ctx: ForwardContext): EngineForward {
  const [gamma, beta, runningMean, runningInvStd] = weights;
  if (!ctx.training) {
    const xhat = tfjs().mul(tfjs().sub(x, runningMean), runningInvStd);
    return { y: as2D(tfjs().add(tfjs().mul(xhat, gamma), beta), 'batchnorm output'), saved: [xhat] };
  }
  const { mean, variance } = tfjs().moments(x, 0);
  const invStd = tfjs().rsqrt(tfjs().add(variance, layer.epsilon));
  const xhat = tfjs().mul(tfjs().sub(x, mean), invStd);
  const y = as2D(tfjs().add(tfjs().mul(xhat, gamma), beta), 'batchnorm output');
  const stats = { mean: Float64Array.from(mean.dataSync()), variance: Float64Array.from(variance.dataSync()) };
  return { y, saved: [xhat, invStd], stats };
}

function engineBackward(_layer: BatchNormLayer, weights: tf.Tensor[], saved: tf.Tensor[], dy: tf.Tensor2D): EngineBackward {
  const gamma = weights[0];
  const xhat = saved[0];
  if (!xhat) throw new Error('batchnorm backward needs the saved tensors of its forward');
  const dbeta = tfjs().sum(dy, 0);
  const dgamma = tfjs().sum(tfjs().mul(dy, xhat), 0);
  if (saved.length === 1) {
    return { dx: as2D(tfjs().mul(dy, tfjs().mul(gamma, weights[3])), 'batchnorm dx'), grads: [dgamma, dbeta] };
  }
  const n = dy.shape[0];
  const g = tfjs().div(tfjs().mul(gamma, saved[1]), n);
  const inner = tfjs().sub(tfjs().sub(tfjs().mul(dy, n), dbeta), tfjs().mul(xhat, dgamma));
  return { dx: as2D(tfjs().mul(g, inner), 'batchnorm dx'), grads: [dgamma, dbeta] };
}

/** The batch normalisation layer kind. */
export const batchnorm: LayerKind<BatchNormLayer, typeof STORED> = {
  kind: 'batchnorm',
  stored: STORED,
  tensors,
  trainable: params,
  clone: (layer) => ({
    ...layer,
    gamma: layer.gamma.slice(),
    beta: layer.beta.slice(),
    runningMean: layer.runningMean.slice(),
    runningVariance: layer.runningVariance.slice(),
  }),
  // The identity: gamma 1, beta 0, running mean 0, running variance 1.
  fillEmpty: (layer, width) =>
    layer.gamma.length === 0
      ? {
          ...layer,
          gamma: new Float32Array(width).fill(1),
          beta: new Float32Array(width),
          runningMean: new Float32Array(width),
          runningVariance: new Float32Array(width).fill(1),
        }
      : null,
  describe: (layer) => `epsilon ${layer.epsilon}, momentum ${layer.momentum}`,
  validate: (layer, inputWidth, where) => storedFieldProblems(STORED, layer, inputWidth, where),
  reference: { forward: (layer, x, ctx) => refForward(layer, x, ctx), backward: (layer, saved, dy) => refBackward(layer, saved, dy) },
  engine: {
    upload: engineUpload,
    forward: (layer, w, x, ctx) => engineForward(layer, w, x, ctx),
    backward: (layer, w, s, dy) => engineBackward(layer, w, s, dy),
  },
  simd: {
    inference: (layer) => ({ op: 'affine', ...batchNormAffine(layer) }),
    training: { refused: 'fast training runs dense and dropout layers only' },
  },
};
