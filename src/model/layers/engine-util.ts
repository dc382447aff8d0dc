/** Small typed adapters for tfjs results whose declared type is wider than what we know. */
import type * as tf from '@tensorflow/tfjs-core';

/** Narrow a tensor we built as rank 2 (tfjs ops return the wide `Tensor` type). */
export function as2D(t: tf.Tensor, what: string): tf.Tensor2D {
  if (t.rank !== 2) throw new Error(`${what}: expected a rank-2 tensor, got shape [${t.shape.join(', ')}]`);
  return t as tf.Tensor2D;
}
