/**
 * The contract every activation fulfils; one file per activation, registered in `catalogue.ts`.
 * Element-wise activations ignore `rows`/`cols`; softmax works per row.
 */
import type * as tf from '@tensorflow/tfjs-core';
import type { ActivationName } from '../types.js';

export interface ActivationKind {
  readonly name: ActivationName;
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
}
