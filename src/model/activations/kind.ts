/**
 * The contract every activation fulfils; one file per activation, registered in `catalogue.ts`.
 * Element-wise activations ignore `rows`/`cols`; softmax works per row.
 */
import type * as tf from '@tensorflow/tfjs-core';
import type { ActivationName } from '../types.js';

/**
 * The fast engine's float32 pass (plain loops over the kernel's output, after the matrix
 * product). Values are computed in double and stored as float32, like the kernel's output.
 */
export interface ActivationF32 {
  /** The kernel's store applies it (its one fused activation is ReLU), so `forward` is not run on kernel output. */
  readonly fusedInKernel: 'relu' | null;
  /** y = f(z) in place on the first `cols` values of `rows` rows that start `stride` apart at `at`. */
  forward(data: Float32Array, at: number, rows: number, stride: number, cols: number, alpha: number): void;
  /** dL/dz from z, y = f(z) and dL/dy (compact rows x cols), as a new array. */
  backward(z: Float32Array, y: Float32Array, dy: Float32Array, rows: number, cols: number, alpha: number): Float32Array;
}

export interface ActivationKind {
  readonly name: ActivationName;
  /** Its code in the file (the Activation enum of formats/tendon.proto; append only, never reused). */
  readonly code: number;
  /** Whether it reads the layer's `alpha` (a slope that must then be >= 0). */
  readonly usesAlpha: boolean;
  /** Initialisation that keeps variance through the layer: He for the ReLU family, Glorot otherwise. */
  readonly init: 'he' | 'glorot';
  /** The name tfjs's fused matMul uses for this activation, when it fuses it. */
  readonly fused?: 'linear' | 'relu' | 'leakyrelu' | 'sigmoid';
  /** float64 reference: y = f(z), a new array. */
  refForward(z: Float64Array, rows: number, cols: number, alpha: number): Float64Array;
  /** float64 reference: dL/dz from z, y = f(z) and dL/dy. */
  refBackward(z: Float64Array, y: Float64Array, dy: Float64Array, rows: number, cols: number, alpha: number): Float64Array;
  /** tfjs engine forward. */
  engineForward(z: tf.Tensor2D, alpha: number): tf.Tensor2D;
  /** tfjs engine: dL/dz. */
  engineBackward(z: tf.Tensor2D, y: tf.Tensor2D, dy: tf.Tensor2D, alpha: number): tf.Tensor2D;
  /** The fast engine's float32 forward and backward (see `pointwiseF32` for element-wise ones). */
  readonly f32: ActivationF32;
}
