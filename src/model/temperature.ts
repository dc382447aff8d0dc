/**
 * The calibration temperature (Guo, Pleiss, Sun and Weinberger 2017): probabilities come from
 * softmax(z / T) (or sigmoid(z / T)) instead of softmax(z), where z are the output layer's logits.
 *
 * Where it is applied: `doc.temperature` stays the stored fact, and the engines never see it.
 * The one function that opens a document for running (`openRunner`, used by the façade, a pool
 * worker, parity and the benchmarks) and the float64 reference forward run
 * `withTemperatureFolded(doc)` instead, which divides the output dense layer's weights and bias
 * by T once: z / T = x·(W / T) + b / T. Dividing every
 * logit of a row by the same positive number keeps their order, so no top class changes, and
 * no engine needs code of its own for it. The training paths read the document as stored
 * without the fold: tune trains the raw logits and fits (or drops) the temperature afterwards.
 */
import type { Problem } from '../errors.js';
import type { DenseLayer, ModelDoc } from './types.js';

/** Output activations a temperature applies to: both turn logits into probabilities. */
const CALIBRATABLE = new Set(['softmax', 'sigmoid']);

/**
 * Index of the dense layer that produces the model's output (only dropout layers, identities
 * at inference, may follow it), or -1 when there is none.
 * @example outputDenseIndex(doc) // 2 for dense, dense, dense(softmax), dropout
 */
export function outputDenseIndex(doc: Pick<ModelDoc, 'layers'>): number {
  for (let i = doc.layers.length - 1; i >= 0; i--) {
    const kind = doc.layers[i].kind;
    if (kind === 'dense') return i;
    if (kind !== 'dropout') return -1;
  }
  return -1;
}

/** Whether a temperature can apply: the output comes from a softmax or sigmoid dense layer. */
export function canCalibrate(doc: Pick<ModelDoc, 'layers'>): boolean {
  const i = outputDenseIndex(doc);
  return i >= 0 && CALIBRATABLE.has((doc.layers[i] as DenseLayer).activation);
}

/** The temperature in force: the stored one, or 1 when none is stored. */
export function temperatureOf(doc: Pick<ModelDoc, 'temperature'>): number {
  return doc.temperature === undefined ? 1 : doc.temperature;
}

/** Problems with a stored temperature: it must be finite and > 0, on a softmax or sigmoid output. */
export function temperatureProblems(doc: Pick<ModelDoc, 'layers' | 'temperature'>): Problem[] {
  const t = doc.temperature;
  if (t === undefined) return [];
  if (!(Number.isFinite(t) && t > 0)) return [{ where: 'temperature', message: `must be a finite number > 0, got ${t}` }];
  if (!canCalibrate(doc)) {
    return [
      {
        where: 'temperature',
        message: "is set, but the model's output is not a softmax or sigmoid dense layer (a temperature divides logits before one of those)",
      },
    ];
  }
  return [];
}

/**
 * The document as it runs: with a temperature other than 1, a shallow copy whose output dense
 * layer holds W / T and b / T (rounded to float32 once, from float64) and no temperature;
 * otherwise `doc` itself (a temperature that cannot apply is left for validation to refuse).
 * Folding a folded document changes nothing.
 * @example referenceForward(withTemperatureFolded(doc), x) // calibrated probabilities
 */
export function withTemperatureFolded(doc: ModelDoc): ModelDoc {
  const t = doc.temperature;
  if (t === undefined || t === 1) return doc;
  // A temperature that cannot apply stays on the document, so validation names the problem.
  if (temperatureProblems(doc).length > 0) return doc;
  const index = outputDenseIndex(doc);
  const layer = doc.layers[index] as DenseLayer;
  const scaled: DenseLayer = {
    ...layer,
    weight: Float32Array.from(layer.weight, (w) => w / t),
    bias: Float32Array.from(layer.bias, (b) => b / t),
  };
  const { temperature: _stored, ...rest } = doc;
  return { ...rest, layers: doc.layers.map((l, i) => (i === index ? scaled : l)) };
}
