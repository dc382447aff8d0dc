/**
 * Regression target scaling kept inside the model, as input normalisation is: training fits
 * the mean and standard deviation of each target and learns z = (y - mean) / std, so plain SGD
 * on targets in the hundreds does not diverge; the answer is y = z·std + mean.
 *
 * The one place the inversion happens is `foldTargetScaling`: it folds the scaling into the
 * last dense layer (linear, so y = (x·W + b)·s + m = x·(W·s) + (b·s + m) exactly), and every
 * runner calls it when it opens a document (the engine sessions and the float64 reference
 * path), so no kernel knows about it.
 */
import type { Problem } from '../errors.js';
import type { DenseLayer, ModelDoc, TargetScaling } from './types.js';

/**
 * Index of the layer that gives the model's answers when it is a dense layer with a linear
 * activation (trailing dropout layers are identities at inference); -1 otherwise.
 * @example scalableOutputLayer(doc) // 2 for dense relu, dense relu, dense linear
 */
export function scalableOutputLayer(doc: ModelDoc): number {
  let i = doc.layers.length - 1;
  while (i >= 0 && doc.layers[i].kind === 'dropout') i--;
  const layer = doc.layers[i];
  return layer?.kind === 'dense' && layer.activation === 'linear' ? i : -1;
}

/** Every problem with a document's target scaling; none when it has none. */
export function targetScalingProblems(doc: ModelDoc): Problem[] {
  const t = doc.targetScaling;
  if (!t) return [];
  const where = 'targetScaling';
  const at = scalableOutputLayer(doc);
  if (at < 0) return [{ where, message: 'target scaling needs a last dense layer with a linear activation (only dropout may follow it)' }];
  const size = (doc.layers[at] as DenseLayer).size;
  const problems: Problem[] = [];
  if (t.mean.length !== size || t.std.length !== size) {
    problems.push({ where, message: `has ${t.mean.length} means and ${t.std.length} standard deviations, expected one per output (${size})` });
  }
  const badMean = t.mean.findIndex((v) => !Number.isFinite(v));
  if (badMean >= 0) problems.push({ where, message: `mean[${badMean}] is ${t.mean[badMean]}; every value must be finite` });
  const badStd = t.std.findIndex((v) => !(Number.isFinite(v) && v > 0));
  if (badStd >= 0) problems.push({ where, message: `std[${badStd}] is ${t.std[badStd]}; each must be finite and > 0` });
  return problems;
}

/**
 * The document as a runner executes it: the target scaling folded into the last dense layer
 * (W' = W·s, b' = b·s + m per output column, in float64, rounded to float32 once) and removed.
 * Returns `doc` itself when it has no scaling, or when the scaling is unusable (validation
 * then names the problem). Never changes `doc`.
 * @example const runnable = foldTargetScaling(doc); runnable.targetScaling // undefined
 */
export function foldTargetScaling(doc: ModelDoc): ModelDoc {
  const t = doc.targetScaling;
  if (!t || targetScalingProblems(doc).length > 0) return doc;
  const at = scalableOutputLayer(doc);
  const layer = doc.layers[at] as DenseLayer;
  const size = layer.size;
  const weight = new Float32Array(layer.weight.length);
  for (let i = 0; i < weight.length; i++) weight[i] = layer.weight[i] * t.std[i % size];
  const bias = new Float32Array(size);
  for (let j = 0; j < size; j++) bias[j] = layer.bias[j] * t.std[j] + t.mean[j];
  const layers = doc.layers.slice();
  layers[at] = { ...layer, weight, bias };
  const { targetScaling: _folded, ...rest } = doc;
  return { ...rest, layers };
}

/**
 * The inverse fold, for adding a scaling to a model whose last layer already gives answers in
 * target units: W = W'/s, b = (b' - m)/s, so the model's answers do not change. Mutates `doc`
 * (a working copy) and sets its scaling.
 */
export function attachTargetScaling(doc: ModelDoc, scaling: TargetScaling): void {
  const at = scalableOutputLayer(doc);
  if (at < 0) throw new RangeError('attachTargetScaling: the last layer is not a linear dense layer');
  const layer = doc.layers[at] as DenseLayer;
  const size = layer.size;
  for (let i = 0; i < layer.weight.length; i++) layer.weight[i] = layer.weight[i] / scaling.std[i % size];
  for (let j = 0; j < size; j++) layer.bias[j] = (layer.bias[j] - scaling.mean[j]) / scaling.std[j];
  doc.targetScaling = scaling;
}

/**
 * Mean and population standard deviation of each of `outputs` target columns (rows x outputs,
 * row-major), in float64. A target that never varies gets std 1 (only its mean is removed).
 * @example fitTargetScaling(Float32Array.of(1, 3), 2, 1) // { mean: [2], std: [1] }
 */
export function fitTargetScaling(y: ArrayLike<number>, rows: number, outputs: number): TargetScaling {
  const mean = new Float64Array(outputs);
  const m2 = new Float64Array(outputs);
  // Welford, as for the input statistics (model/moments.ts).
  for (let r = 0; r < rows; r++) {
    for (let j = 0; j < outputs; j++) {
      const v = y[r * outputs + j];
      const d = v - mean[j];
      mean[j] += d / (r + 1);
      m2[j] += d * (v - mean[j]);
    }
  }
  const std = m2.map((s) => (rows > 0 && s > 0 ? Math.sqrt(s / rows) : 1));
  return { mean, std };
}
