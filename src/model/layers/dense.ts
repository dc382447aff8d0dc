/**
 * Dense layer: y = f(x·W + b), W [inputs, size] row-major, b [size].
 * Trainable: [weight, bias]. Reference `saved` is { x, z, y }; engine `saved` is [x, z, y]
 * (training mode only), so backward can start from dL/dy or, for a caller that already has it,
 * from dL/dz (`dyIsPreActivation`).
 */
import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from '../tfjs-lazy.js';
import type { Problem } from '../../errors.js';
import { activationKind, isActivationName } from '../activations/catalogue.js';
import type { DenseLayer, ParamRef } from '../types.js';
import { as2D } from './engine-util.js';
import type { BackwardOptions, EngineBackward, EngineForward, LayerKind, Mat64, RefBackward, RefForward } from './kind.js';
import { columnSums64, mat64, matMul64, matMulTransA64, matMulTransB64 } from './mat64.js';
import { storedFieldProblems, type StoredForm } from './fields.js';
import { DEFAULT_LEAKY_ALPHA, initDense } from '../init.js';

/** What a dense layer stores (formats/tendon.proto, DenseParams); `size` is its output width. */
const STORED = {
  output: 'size',
  fields: [
    { type: 'count', key: 'size', proto: 'size', spec: 'size' },
    { type: 'activation', key: 'activation', proto: 'activation', spec: 'activation', default: 'linear' },
    { type: 'tensor', key: 'weight', proto: 'weight', spec: 'weight', shape: ['in', 'size'], storage: 'model', start: 'drawn' },
    { type: 'tensor', key: 'bias', proto: 'bias', spec: 'bias', shape: ['size'], storage: 'f32', start: 0 },
    { type: 'number', key: 'alpha', proto: 'alpha', spec: 'alpha', rule: { ok: Number.isFinite, rule: 'a finite number' }, default: DEFAULT_LEAKY_ALPHA },
  ],
} as const satisfies StoredForm<DenseLayer>;

interface DenseSaved {
  readonly x: Mat64;
  readonly z: Float64Array;
  readonly y: Float64Array;
}

function params(layer: DenseLayer, inputWidth: number, index: number): ParamRef[] {
  return [
    { name: `layers[${index}].weight`, shape: [inputWidth, layer.size], data: layer.weight },
    { name: `layers[${index}].bias`, shape: [layer.size], data: layer.bias },
  ];
}

function refForward(layer: DenseLayer, x: Mat64): RefForward {
  const units = layer.size;
  const z = matMul64(x.data, x.rows, x.cols, layer.weight, units);
  for (let r = 0; r < x.rows; r++) {
    const o = r * units;
    for (let j = 0; j < units; j++) z[o + j] += layer.bias[j];
  }
  const y = activationKind(layer.activation).refForward(z, x.rows, units, layer.alpha);
  const saved: DenseSaved = { x, z, y };
  return { y: mat64(x.rows, units, y), z: mat64(x.rows, units, z), saved };
}

function isDenseSaved(s: unknown): s is DenseSaved {
  return typeof s === 'object' && s !== null && 'x' in s && 'z' in s && 'y' in s;
}

function refBackward(layer: DenseLayer, saved: unknown, dy: Mat64, opts?: BackwardOptions): RefBackward {
  if (!isDenseSaved(saved)) throw new Error('dense backward: saved is not from a dense reference forward');
  const { x, z, y } = saved;
  const units = layer.size;
  const dz = opts?.dyIsPreActivation ? dy.data : activationKind(layer.activation).refBackward(z, y, dy.data, x.rows, units, layer.alpha);
  const dW = matMulTransA64(x.data, x.rows, x.cols, dz, units);
  const db = columnSums64(dz, x.rows, units);
  const dx = matMulTransB64(dz, x.rows, units, layer.weight, x.cols);
  return { dx: mat64(x.rows, x.cols, dx), grads: [dW, db] };
}

function engineUpload(layer: DenseLayer): tf.Tensor[] {
  const inputs = layer.weight.length / layer.size;
  // slice(): the CPU backend keeps the array it is given, so without a copy later edits to
  // the document's weights would leak into the engine without a refresh.
  return [tfjs().tensor2d(layer.weight.slice(), [inputs, layer.size]), tfjs().tensor1d(layer.bias.slice())];
}

function engineForward(layer: DenseLayer, weights: tf.Tensor[], x: tf.Tensor2D, ctx: { training: boolean }): EngineForward {
  const [w, b] = weights;
  const act = activationKind(layer.activation);
  if (!ctx.training && act.fused) {
    const y = tfjs().fused.matMul({ a: x, b: as2D(w, 'dense weight'), bias: b, activation: act.fused, leakyreluAlpha: layer.alpha });
    return { y: as2D(y, 'dense output'), saved: [] };
  }
  const z = as2D(tfjs().fused.matMul({ a: x, b: as2D(w, 'dense weight'), bias: b }), 'dense z');
  const y = act.engineForward(z, layer.alpha);
  if (!ctx.training) return { y, saved: [] };
  // clone(): shares x's data but has its own handle, so disposing saved never frees the caller's x.
  return { y, z, saved: [tfjs().clone(x), z, y] };
}

function engineBackward(layer: DenseLayer, weights: tf.Tensor[], saved: tf.Tensor[], dy: tf.Tensor2D, opts?: BackwardOptions): EngineBackward {
  if (saved.length !== 3) throw new Error('dense backward needs the saved tensors of a training-mode forward');
  const [x, z, y] = saved.map((t, i) => as2D(t, `dense saved[${i}]`));
  const w = as2D(weights[0], 'dense weight');
  const dz = opts?.dyIsPreActivation ? dy : activationKind(layer.activation).engineBackward(z, y, dy, layer.alpha);
  const dW = tfjs().matMul(x, dz, true, false);
  const db = tfjs().sum(dz, 0);
  const dx = as2D(tfjs().matMul(dz, w, false, true), 'dense dx');
  return { dx, grads: [dW, db] };
}

function validate(layer: DenseLayer, inputWidth: number, where: string): Problem[] {
  const problems = storedFieldProblems(STORED, layer, inputWidth, where);
  // Beyond the declared rule: a slope for negative inputs is not negative.
  if (isActivationName(layer.activation) && activationKind(layer.activation).usesAlpha && layer.alpha < 0) {
    problems.push({ where, message: `alpha must be a finite number >= 0, got ${layer.alpha}` });
  }
  return problems;
}

/** The dense layer kind. */
export const dense: LayerKind<DenseLayer, typeof STORED> = {
  kind: 'dense',
  stored: STORED,
  tensors: params,
  trainable: params,
  clone: (layer) => ({ ...layer, weight: layer.weight.slice(), bias: layer.bias.slice() }),
  // He / Glorot weights from the seeded generator, zero biases; alpha as given.
  fillEmpty: (layer, inputWidth, rng) =>
    layer.weight.length === 0 ? { ...initDense(inputWidth, layer.size, layer.activation, rng, layer.alpha), alpha: layer.alpha } : null,
  describe: (layer) =>
    isActivationName(layer.activation) && activationKind(layer.activation).usesAlpha ? `${layer.activation} (alpha ${layer.alpha})` : layer.activation,
  validate,
  reference: { forward: (layer, x) => refForward(layer, x), backward: refBackward },
  engine: { upload: engineUpload, forward: (layer, w, x, ctx) => engineForward(layer, w, x, ctx), backward: engineBackward },
  simd: {
    inference: (layer) => ({ op: 'dense', weight: layer.weight, bias: layer.bias, size: layer.size, activation: layer.activation, alpha: layer.alpha }),
    training: (layer) => ({ op: 'dense', layer }),
  },
};
