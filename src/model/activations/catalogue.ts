/** The one list of activations. Adding one means a new file and a line here. */
import type { ActivationName } from '../types.js';
import type { ActivationKind } from './kind.js';
import { leakyRelu } from './leaky-relu.js';
import { linear } from './linear.js';
import { relu } from './relu.js';
import { sigmoid } from './sigmoid.js';
import { softmax } from './softmax.js';
import { softplus } from './softplus.js';
import { tanh } from './tanh.js';

// A record typed by every ActivationName: a missing entry is a compile error.
const CATALOGUE: Record<ActivationName, ActivationKind> = {
  linear,
  relu,
  leaky_relu: leakyRelu,
  sigmoid,
  tanh,
  softplus,
  softmax,
};

/**
 * The implementation of an activation.
 * @example activationKind('relu').refForward(Float64Array.of(-1, 2), 1, 2, 0) // [0, 2]
 */
export function activationKind(name: ActivationName): ActivationKind {
  return CATALOGUE[name];
}
