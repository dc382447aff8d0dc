/** The output layer's logits on the float64 path: what a calibration temperature divides. */
import { mat64, outputDenseIndex, type DenseLayer, type ModelDoc } from '../model/index.js';
import { referenceForward } from './forward.js';

/**
 * Pre-activation z of the model's output dense layer, rows x outputs, in float64, ignoring any
 * stored temperature (it is what a temperature is fitted to). Layers after the output layer
 * can only be dropout, the identity at inference.
 * @example referenceLogits(doc, x, rows) // z with softmax(z) = the model's probabilities at T = 1
 * @throws RangeError when the model's output is not a dense layer.
 */
export function referenceLogits(doc: ModelDoc, x: Float32Array | Float64Array, rows: number): Float64Array {
  const index = outputDenseIndex(doc);
  if (index < 0) throw new RangeError("referenceLogits: the model's output is not a dense layer");
  const out = doc.layers[index] as DenseLayer;
  const { temperature: _ignored, ...rest } = doc;
  const view: ModelDoc = { ...rest, layers: [...doc.layers.slice(0, index), { ...out, activation: 'linear' }] };
  return referenceForward(view, mat64(rows, doc.inputs, Float64Array.from(x))).y.data;
}
