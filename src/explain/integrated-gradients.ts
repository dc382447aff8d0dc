/**
 * Integrated gradients (Sundararajan, Taly and Yan, "Axiomatic Attribution for Deep Networks",
 * ICML 2017): the attribution of feature i for output F at row x against a baseline x' is
 *
 *   a_i = (x_i - x'_i) · ∫₀¹ ∂F/∂x_i (x' + α (x - x')) dα,
 *
 * and the attributions sum to F(x) - F(x') (completeness). The integral is taken with the
 * midpoint rule over `steps` equal pieces (α = (k + ½) / steps): its error falls as 1/steps²
 * on smooth stretches where the paper's right-hand Riemann sum falls as 1/steps, for the same
 * number of gradient evaluations. Gradients are exact float64 gradients of the model as stored
 * (reference path), through the normalisation and every layer.
 */
import { mat64, type ModelDoc } from '../model/index.js';
import { inputGradient, referenceForward } from '../reference/index.js';

/** Interpolation points evaluated in one reference batch; bounds memory at wide inputs. */
const POINTS_PER_BATCH = 4096;

export interface Attribution {
  /** rows x inputs: each feature's share of score - baselineScore, in the output's units. */
  readonly attributions: Float64Array;
  /** The explained output at each row. */
  readonly score: Float64Array;
  /** The explained output at the baseline (the same for every row with the same class). */
  readonly baselineScore: Float64Array;
}

/**
 * Integrated gradients of output `classes[r]` for each row r of x (rows x inputs, raw features)
 * against one baseline row, with `steps` midpoint-rule pieces.
 * @example integratedGradients(doc, x, 1, baseline, Int32Array.of(0), 64).attributions
 */
export function integratedGradients(
  doc: ModelDoc,
  x: ArrayLike<number>,
  rows: number,
  baseline: Float64Array,
  classes: Int32Array,
  steps: number,
): Attribution {
  const n = doc.inputs;
  const attributions = new Float64Array(rows * n);
  const rowsPerBatch = Math.max(1, Math.floor(POINTS_PER_BATCH / steps));
  for (let first = 0; first < rows; first += rowsPerBatch) {
    const count = Math.min(rowsPerBatch, rows - first);
    const points = mat64(count * steps, n);
    const output = new Int32Array(count * steps);
    for (let r = 0; r < count; r++) {
      for (let k = 0; k < steps; k++) {
        const alpha = (k + 0.5) / steps;
        const o = (r * steps + k) * n;
        for (let c = 0; c < n; c++) {
          const b = baseline[c];
          points.data[o + c] = b + alpha * (x[(first + r) * n + c] - b);
        }
        output[r * steps + k] = classes[first + r];
      }
    }
    const { dx } = inputGradient(doc, points, output);
    for (let r = 0; r < count; r++) {
      for (let c = 0; c < n; c++) {
        let sum = 0;
        for (let k = 0; k < steps; k++) sum += dx.data[(r * steps + k) * n + c];
        const row = first + r;
        attributions[row * n + c] = (x[row * n + c] - baseline[c]) * (sum / steps);
      }
    }
  }
  const score = outputAt(
    doc,
    Float64Array.from({ length: rows * n }, (_, i) => x[i]),
    rows,
    classes,
  );
  const baselineRows = new Float64Array(rows * n);
  for (let r = 0; r < rows; r++) baselineRows.set(baseline, r * n);
  const baselineScore = outputAt(doc, baselineRows, rows, classes);
  return { attributions, score, baselineScore };
}

/** The chosen output of each row, as the model runs (calibration temperature included). */
function outputAt(doc: ModelDoc, x: Float64Array, rows: number, classes: Int32Array): Float64Array {
  const y = referenceForward(doc, mat64(rows, doc.inputs, x)).y;
  return Float64Array.from({ length: rows }, (_, r) => y.data[r * y.cols + classes[r]]);
}

/**
 * Completeness gap of each row: |sum of attributions - (score - baselineScore)| relative to the
 * larger of |score - baselineScore| and the attributions' total size sum |a_i|. The second
 * keeps the ratio meaningful when features pull both ways and the score barely moves: there a
 * ratio over the near-zero difference would call a tiny absolute error huge.
 */
export function completenessGaps(a: Attribution, inputs: number): Float64Array {
  const rows = a.score.length;
  return Float64Array.from({ length: rows }, (_, r) => {
    let sum = 0;
    let size = 0;
    for (let c = 0; c < inputs; c++) {
      sum += a.attributions[r * inputs + c];
      size += Math.abs(a.attributions[r * inputs + c]);
    }
    const delta = a.score[r] - a.baselineScore[r];
    const scale = Math.max(Math.abs(delta), size);
    return scale === 0 ? 0 : Math.abs(sum - delta) / scale;
  });
}
