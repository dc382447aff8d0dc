/** Initial weights that keep the variance of activations roughly constant from layer to layer. */
import { activationKind } from './activations/catalogue.js';
import type { SeededRng } from './rng.js';
import type { ActivationName, DenseLayer } from './types.js';

/** Slope for negative inputs given to a fresh leaky_relu layer. */
export const DEFAULT_LEAKY_ALPHA = 0.01;

/**
 * A fresh dense layer with normal weights and zero biases:
 * - He et al. 2015, variance 2 / fan_in, for the ReLU family (relu, leaky_relu, softplus): these
 *   pass about half their input's variance, and the factor 2 makes up for it. softplus is
 *   counted in because it behaves like ReLU away from zero.
 * - Glorot and Bengio 2010, variance 2 / (fan_in + fan_out), otherwise (linear, sigmoid, tanh,
 *   softmax), balancing the forward and backward variance of near-linear units.
 * The choice is each activation's `init` field.
 * @example initDense(4, 16, 'relu', new SeededRng(7)).weight.length // 64
 */
export function initDense(inputs: number, units: number, activation: ActivationName, rng: SeededRng, alpha = DEFAULT_LEAKY_ALPHA): DenseLayer {
  const variance = activationKind(activation).init === 'he' ? 2 / inputs : 2 / (inputs + units);
  const sd = Math.sqrt(variance);
  const weight = new Float32Array(inputs * units);
  for (let i = 0; i < weight.length; i++) weight[i] = rng.normal() * sd;
  return { kind: 'dense', size: units, activation, alpha, weight, bias: new Float32Array(units) };
}
