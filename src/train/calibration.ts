/**
 * Temperature scaling and the expected calibration error (Guo, Pleiss, Sun and Weinberger, "On
 * Calibration of Modern Neural Networks", ICML 2017).
 *
 * A classifier's logits z become probabilities softmax(z / T). One scalar T > 0 is fitted on
 * hold-out rows by minimising their mean negative log-likelihood; dividing every logit of a row
 * by the same positive T keeps their order, so no top class changes. A single sigmoid output
 * is the two-class softmax of [0, z] (sigmoid(z) = e^z / (e^0 + e^z)), so both share one code.
 *
 * ECE: M = 15 equal-width bins of the top probability, bin m = ((m-1)/M, m/M];
 * ECE = sum over bins of (|B_m| / n) |acc(B_m) - conf(B_m)|.
 */

/** Bins of the expected calibration error, as in the paper. */
export const ECE_BINS = 15;

/** Where the temperature is searched: [1/100, 100]. A fit at an end says so (`atBound`). */
const T_MIN = 0.01;
const T_MAX = 100;
/** Golden-section stops when the bracket on log T is this narrow (T known to about 1e-6 relative). */
const LOG_T_TOLERANCE = 1e-6;

/**
 * Logits as rows of class scores: a single (sigmoid) output z becomes the two classes [0, z];
 * wider outputs are returned as they are.
 */
export function classLogits(z: Float64Array, rows: number, outputs: number): { logits: Float64Array; classes: number } {
  if (outputs !== 1) return { logits: z, classes: outputs };
  const logits = new Float64Array(rows * 2);
  for (let r = 0; r < rows; r++) logits[r * 2 + 1] = z[r];
  return { logits, classes: 2 };
}

/**
 * Class probabilities from the model's outputs: softmax rows as they are; a single sigmoid
 * output p becomes [1 - p, p].
 */
export function classProbabilities(y: ArrayLike<number>, rows: number, outputs: number): { probs: Float64Array; classes: number } {
  if (outputs !== 1) return { probs: Float64Array.from(y), classes: outputs };
  const probs = new Float64Array(rows * 2);
  for (let r = 0; r < rows; r++) {
    probs[r * 2] = 1 - y[r];
    probs[r * 2 + 1] = y[r];
  }
  return { probs, classes: 2 };
}

/** Row-wise softmax of logits / t, in float64 (the row maximum is subtracted first). */
export function scaledSoftmax(logits: Float64Array, rows: number, classes: number, t: number): Float64Array {
  const p = new Float64Array(rows * classes);
  for (let r = 0; r < rows; r++) {
    const o = r * classes;
    let max = -Infinity;
    for (let c = 0; c < classes; c++) max = Math.max(max, logits[o + c] / t);
    let sum = 0;
    for (let c = 0; c < classes; c++) sum += p[o + c] = Math.exp(logits[o + c] / t - max);
    for (let c = 0; c < classes; c++) p[o + c] /= sum;
  }
  return p;
}

/**
 * Mean negative log-likelihood (nats per row) of `labels` under softmax(logits / t), computed
 * as logsumexp(z / t) - z_y / t so a confident wrong row gives a large finite number, not Infinity.
 */
export function meanNll(logits: Float64Array, rows: number, classes: number, labels: Int32Array, t: number): number {
  let total = 0;
  for (let r = 0; r < rows; r++) {
    const o = r * classes;
    let max = -Infinity;
    for (let c = 0; c < classes; c++) max = Math.max(max, logits[o + c] / t);
    let sum = 0;
    for (let c = 0; c < classes; c++) sum += Math.exp(logits[o + c] / t - max);
    total += max + Math.log(sum) - logits[o + labels[r]] / t;
  }
  return total / rows;
}

/**
 * Expected calibration error of class probabilities against true labels, with `bins`
 * equal-width bins of the top probability; bins are (lower, upper], edges m / bins compared
 * exactly so a value on an edge falls in the lower bin. Ties for the top class go to the
 * lowest index (as argmax does).
 * @example expectedCalibrationError(Float64Array.of(0.9, 0.1), 1, 2, Int32Array.of(0)) // 0.1
 */
export function expectedCalibrationError(probs: Float64Array, rows: number, classes: number, labels: Int32Array, bins = ECE_BINS): number {
  if (rows === 0) return 0;
  const count = new Float64Array(bins);
  const correct = new Float64Array(bins);
  const confidence = new Float64Array(bins);
  for (let r = 0; r < rows; r++) {
    const o = r * classes;
    let top = 0;
    for (let c = 1; c < classes; c++) if (probs[o + c] > probs[o + top]) top = c;
    const conf = probs[o + top];
    let b = Math.min(bins - 1, Math.max(0, Math.ceil(conf * bins) - 1));
    // conf * bins can round across an edge (0.4 * 15 = 6.000000000000001); settle on the edges.
    while (b > 0 && conf <= b / bins) b--;
    while (b < bins - 1 && conf > (b + 1) / bins) b++;
    count[b]++;
    confidence[b] += conf;
    if (top === labels[r]) correct[b]++;
  }
  let ece = 0;
  for (let b = 0; b < bins; b++) {
    if (count[b] > 0) ece += (count[b] / rows) * Math.abs(correct[b] / count[b] - confidence[b] / count[b]);
  }
  return ece;
}

export interface TemperatureFit {
  /** The fitted T in [0.01, 100]. */
  readonly temperature: number;
  /**
   * True when the fit stopped at an end of the search range: the NLL has no minimum inside it
   * (at the low end, typically because every hold-out row is classified right). Such a T is not
   * stored by tune.
   */
  readonly atBound: boolean;
  readonly rows: number;
  /** Mean negative log-likelihood (nats per row) at T = 1 and at the fitted T. */
  readonly nllBefore: number;
  readonly nllAfter: number;
  /** Expected calibration error (15 bins) at T = 1 and at the fitted T. */
  readonly eceBefore: number;
  readonly eceAfter: number;
}

/**
 * Fit T > 0 minimising the mean NLL of `labels` under softmax(logits / T).
 *
 * Why golden-section on log T: the NLL is convex in 1/T (a log-sum-exp of a linear function of
 * 1/T minus a linear term), so it has one minimum and is unimodal along the monotone map
 * T = e^s. Golden-section search needs no derivatives and cannot overshoot; searching log T
 * gives the same relative precision at T = 0.05 as at T = 20. About 30 evaluations of the NLL.
 * @example fitTemperature(z, rows, classes, labels).temperature // > 1 for an over-confident model
 */
export function fitTemperature(logits: Float64Array, rows: number, classes: number, labels: Int32Array): TemperatureFit {
  const f = (s: number) => meanNll(logits, rows, classes, labels, Math.exp(s));
  const ratio = (Math.sqrt(5) - 1) / 2;
  let lo = Math.log(T_MIN);
  let hi = Math.log(T_MAX);
  let a = hi - ratio * (hi - lo);
  let b = lo + ratio * (hi - lo);
  let fa = f(a);
  let fb = f(b);
  while (hi - lo > LOG_T_TOLERANCE) {
    if (fa <= fb) {
      hi = b;
      b = a;
      fb = fa;
      a = hi - ratio * (hi - lo);
      fa = f(a);
    } else {
      lo = a;
      a = b;
      fa = fb;
      b = lo + ratio * (hi - lo);
      fb = f(b);
    }
  }
  const s = (lo + hi) / 2;
  const temperature = Math.exp(s);
  const atBound = s - Math.log(T_MIN) < 1e-3 || Math.log(T_MAX) - s < 1e-3;
  return {
    temperature,
    atBound,
    rows,
    nllBefore: meanNll(logits, rows, classes, labels, 1),
    nllAfter: meanNll(logits, rows, classes, labels, temperature),
    eceBefore: expectedCalibrationError(scaledSoftmax(logits, rows, classes, 1), rows, classes, labels),
    eceAfter: expectedCalibrationError(scaledSoftmax(logits, rows, classes, temperature), rows, classes, labels),
  };
}

/** The cautions printed beside a calibration figure. */
export const CALIBRATION_CAUTION = 'a calibrated probability holds for data like the rows it was fitted on; it drifts when the data drift';
