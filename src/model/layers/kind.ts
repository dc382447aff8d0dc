/**
 * The contract every layer kind fulfils. One file per kind (dense.ts, batchnorm.ts, dropout.ts)
 * holds its whole story: parameter shapes, validation, initialisation, the tfjs engine forward
 * and backward, and the float64 reference forward and backward. `catalogue.ts` registers them.
 *
 * The reference halves use plain loops over Float64Array and never touch tfjs; the engine halves
 * use tfjs ops only. They share no compute code, so parity between them means something.
 */
import type * as tf from '@tensorflow/tfjs-core';
import type { Problem } from '../../errors.js';
import type { SeededRng } from '../rng.js';
import type { ActivationName, Layer, ParamRef } from '../types.js';
import type { StoredForm } from './fields.js';

/** What every layer document has: its kind's name. The built-in kinds make up `Layer`. */
export interface AnyLayer {
  readonly kind: string;
}

/** A rows x cols float64 matrix, row-major. */
export interface Mat64 {
  readonly rows: number;
  readonly cols: number;
  readonly data: Float64Array;
}

/** Seeded source of uniform numbers in [0, 1), shared so engine and reference draw the same masks. */
export interface Rng {
  next(): number;
}

export interface ForwardContext {
  /** Training mode: dropout masks, batch statistics in batch normalisation. */
  readonly training: boolean;
  /**
   * Dropout keep-mask for `layerIndex`: rows*cols values of 0 or 1/(1-rate). The same call
   * gives the same mask to the engine and the reference within one step.
   */
  dropoutMask(layerIndex: number, rows: number, cols: number, rate: number): Float32Array;
}

/**
 * Statistics of one training batch (batch normalisation): per-feature mean and biased variance.
 * The train loop folds them into the running statistics with the layer's momentum.
 */
export interface BatchStats {
  readonly mean: Float64Array;
  readonly variance: Float64Array;
}

/** How backward reads its incoming gradient. */
export interface BackwardOptions {
  /**
   * The incoming gradient is dLoss/dz on the pre-activation z of a dense layer, not dLoss/dy.
   * Lets a caller hand softmax + cross-entropy's stable `p - t` straight to the last layer.
   * Only dense layers accept it.
   */
  readonly dyIsPreActivation?: boolean;
}

/** Float64 reference forward result; `saved` is whatever backward needs (declared by the kind). */
export interface RefForward {
  readonly y: Mat64;
  readonly saved: unknown;
  /** Dense only: the pre-activation z = x·W + b (the logits of a final layer). */
  readonly z?: Mat64;
  /** Batch normalisation in training mode only: this batch's mean and biased variance. */
  readonly stats?: BatchStats;
}

export interface RefBackward {
  /** dLoss/dInput. */
  readonly dx: Mat64;
  /** dLoss/dParam, one per trainable parameter, in the order of `trainable()`. */
  readonly grads: Float64Array[];
}

export interface EngineForward {
  readonly y: tf.Tensor2D;
  /** Tensors backward needs; the caller disposes them after backward. */
  readonly saved: tf.Tensor[];
  /**
   * Dense in training mode only: the pre-activation z. It is one of the `saved` tensors, so
   * disposing `saved` disposes it.
   */
  readonly z?: tf.Tensor2D;
  /** Batch normalisation in training mode only: this batch's mean and biased variance. */
  readonly stats?: BatchStats;
}

export interface EngineBackward {
  readonly dx: tf.Tensor2D;
  /** One per trainable parameter, in the order of `trainable()`. */
  readonly grads: tf.Tensor[];
}

/**
 * How the fast engine (our own float32 WebAssembly kernel) runs a layer at inference, in the
 * few operations it has: a dense product (bias and activation included), a per-feature affine
 * map y = scale ⊙ x + shift (float64 here, rounded to float32 once), or nothing.
 */
export type SimdInference =
  | {
      readonly op: 'dense';
      readonly weight: Float32Array;
      readonly bias: Float32Array;
      readonly size: number;
      readonly activation: ActivationName;
      readonly alpha: number;
    }
  | { readonly op: 'affine'; readonly scale: Float64Array; readonly shift: Float64Array }
  | { readonly op: 'identity' };

/**
 * How the fast engine trains a layer: a dense product whose weight and bias it reads from
 * `layer` (the optimiser changes them in place), or a dropout mask drawn from the context.
 */
export type SimdTraining =
  | {
      readonly op: 'dense';
      readonly layer: {
        readonly size: number;
        readonly activation: ActivationName;
        readonly alpha: number;
        readonly weight: Float32Array;
        readonly bias: Float32Array;
      };
    }
  | { readonly op: 'mask'; readonly rate: number };

/** A layer kind's part in the fast engine; a null half means that engine refuses it, naming why. */
export interface SimdPart<L extends AnyLayer> {
  readonly inference: ((layer: L) => SimdInference) | { readonly refused: string };
  readonly training: ((layer: L) => SimdTraining) | { readonly refused: string };
}

/** `S` keeps the literal declarations of a built-in kind, from which format/payload.ts types its message. */
export interface LayerKind<L extends AnyLayer = Layer, S extends StoredForm<L> = StoredForm<L>> {
  readonly kind: L['kind'];
  /**
   * Its stored fields, declared once: the codec, the file check, the spec and validation read
   * them (fields.ts), and its output width follows from them (`layerOutputWidth`).
   */
  readonly stored: S;
  /** Every stored tensor of the layer with its shape (for `tendon about` and the tune copies). */
  tensors(layer: L, inputWidth: number, index: number): ParamRef[];
  /** Tensors updated by gradient descent, in a fixed order; gradients come back in this order. */
  trainable(layer: L, inputWidth: number, index: number): ParamRef[];
  /** A deep copy that shares no array with `layer`. */
  clone(layer: L): L;
  /**
   * Starting values for a layer stored without them (a spec for a first tune), or null when it
   * has its values already (or needs none).
   */
  fillEmpty(layer: L, inputWidth: number, rng: SeededRng): L | null;
  /** Its attributes in a few words, for `tendon about` (e.g. "relu", "rate 0.2"). */
  describe(layer: L): string;
  /**
   * Problems with attributes and tensor sizes; `where` is e.g. "layers[2] (dense)". Start from
   * `storedFieldProblems` (the declared rules) and add what a single field cannot say.
   */
  validate(layer: L, inputWidth: number, where: string): Problem[];

  readonly reference: {
    forward(layer: L, x: Mat64, ctx: ForwardContext, index: number): RefForward;
    backward(layer: L, saved: unknown, dy: Mat64, opts?: BackwardOptions): RefBackward;
  };

  readonly engine: {
    /** Upload the layer's tensors once; the engine keeps them for the model's lifetime. */
    upload(layer: L): tf.Tensor[];
    forward(layer: L, weights: tf.Tensor[], x: tf.Tensor2D, ctx: ForwardContext, index: number): EngineForward;
    backward(layer: L, weights: tf.Tensor[], saved: tf.Tensor[], dy: tf.Tensor2D, opts?: BackwardOptions): EngineBackward;
  };

  /** Its part in the fast engine, or why that engine refuses it (at open, naming the layer). */
  readonly simd: SimdPart<L>;
}
