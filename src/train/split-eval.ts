/**
 * Evaluation of a split (the training rows or the hold-out) after an epoch, in inference mode:
 * loss, accuracy and confusion for classifiers, MAE and RMSE for regression, and which ReLU
 * units fired. Separate from the loop because it never changes weights.
 */
import type { ModelDoc, TargetScaling } from '../model/index.js';
import type { TrainBackend } from './backends.js';
import type { TuneData } from './config.js';
import { ReluActivity } from './diagnostics.js';
import { computeLoss, type LossSpec } from './losses.js';
import { accuracy, confusionMatrix, meanAbsoluteError, predictedClasses, rootMeanSquaredError } from './metrics.js';
import { targetsOf } from './tune-data.js';

export interface SplitMetrics {
  /** On the targets as the model learns them (scaled, when the model scales its targets). */
  readonly loss: number;
  /** Classifiers only. */
  readonly accuracy: number | null;
  /** Classifiers only: row = true class, column = predicted. */
  readonly confusion: number[][] | null;
  /** Regression only, in target units (a target scaling is undone first). */
  readonly mae: number | null;
  readonly rmse: number | null;
}

export interface Evaluation {
  readonly metrics: SplitMetrics;
  readonly relu: ReluActivity;
}

/** Rows per piece when evaluating, so memory stays bounded on large data. */
const EVAL_ROWS = 4096;

/** Hidden dense ReLU layers (not the last layer), whose dead units the diagnostics count. */
export function hiddenReluLayers(doc: ModelDoc): number[] {
  return doc.layers.flatMap((l, i) => (l.kind === 'dense' && l.activation === 'relu' && i !== doc.layers.length - 1 ? [i] : []));
}

/**
 * Metrics of `data` under the backend's current weights, and the activity of `reluLayers`.
 *
 * @example const { metrics } = evaluateSplit(backend, work, held, spec, 3, true, []);
 */
export function evaluateSplit(
  backend: TrainBackend,
  doc: ModelDoc,
  data: TuneData,
  spec: LossSpec,
  outputs: number,
  classifier: boolean,
  reluLayers: readonly number[],
  targetScaling: TargetScaling | null = null,
): Evaluation {
  const relu = new ReluActivity();
  let lossSum = 0;
  const outAll = new Float64Array(data.rows * outputs);
  for (let start = 0; start < data.rows; start += EVAL_ROWS) {
    const n = Math.min(EVAL_ROWS, data.rows - start);
    const layers = backend.evaluate(data.x.subarray(start * doc.inputs, (start + n) * doc.inputs), n);
    for (const i of reluLayers) {
      const l = doc.layers[i];
      if (l.kind === 'dense') relu.observe(i, layers[i], n, l.size);
    }
    const out = Float64Array.from(layers[layers.length - 1]);
    outAll.set(out, start * outputs);
    lossSum += computeLoss(spec, out, n, outputs, targetsOf(data.y, start, start + n, outputs)).value * n;
  }
  const loss = lossSum / data.rows;
  if (classifier && data.y instanceof Int32Array) {
    // A single sigmoid output: the evaluation output is a logit when the loss reads logits.
    const predicted = predictedClasses(outAll, data.rows, outputs, spec.input === 'logits' ? 0 : 0.5);
    return {
      metrics: {
        loss,
        accuracy: accuracy(predicted, data.y),
        confusion: confusionMatrix(predicted, data.y, outputs === 1 ? 2 : outputs),
        mae: null,
        rmse: null,
      },
      relu,
    };
  }
  const t = data.y instanceof Int32Array ? Float64Array.from(data.y) : Float64Array.from(data.y);
  if (targetScaling) {
    // Both sides back in target units: z·std + mean.
    for (let i = 0; i < t.length; i++) {
      const j = i % outputs;
      outAll[i] = outAll[i] * targetScaling.std[j] + targetScaling.mean[j];
      t[i] = t[i] * targetScaling.std[j] + targetScaling.mean[j];
    }
  }
  return { metrics: { loss, accuracy: null, confusion: null, mae: meanAbsoluteError(outAll, t), rmse: rootMeanSquaredError(outAll, t) }, relu };
}
