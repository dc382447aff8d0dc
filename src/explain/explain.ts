/**
 * Explaining rows: which output is explained, against which baseline, with how many steps, and
 * raising the steps for rows whose completeness gap passes 1%. Shared by `tendon explain` and
 * the endpoint's explain route; each refusal names the option it is about.
 */
import { UsageError } from '../errors.js';
import { mat64, outputWidth, type ModelDoc } from '../model/index.js';
import { referenceForward } from '../reference/index.js';
import { completenessGaps, integratedGradients } from './integrated-gradients.js';

/** Default midpoint-rule steps (the paper uses 20 to 300 Riemann steps). */
export const DEFAULT_STEPS = 64;
/** Most steps a caller may ask for: beyond this a run costs minutes per row for no visible gain. */
export const MAX_STEPS = 10_000;
/** Rows over the gap tolerance are redone with 4x the steps, up to this many (or the steps asked for, if more). */
export const AUTO_STEPS_LIMIT = 1024;
/** Completeness is held to 1% of score - baselineScore (the paper checks it to within a few percent). */
export const GAP_TOLERANCE = 0.01;

/** The words printed beside attributions. */
export const ATTRIBUTION_CAUTION = 'attributions describe what the model computes, not causes in the world';

/** Which output is explained: each row's top output, or one output index for every row. */
export type ClassChoice = 'top' | number;

/**
 * `top`, one of the model's output labels, or a 0-based output index.
 * @throws UsageError naming `flag` for a label or index the model does not have.
 */
export function parseClassChoice(doc: ModelDoc, text: string, flag: string): ClassChoice {
  const t = text.trim();
  if (t === 'top') return 'top';
  const outputs = outputWidth(doc);
  const byLabel = doc.labels?.indexOf(t) ?? -1;
  if (byLabel >= 0) return byLabel;
  if (/^\d+$/.test(t) && Number(t) < outputs) return Number(t);
  const known = doc.labels ? `top, a label (${doc.labels.join(', ')}) or an index 0..${outputs - 1}` : `top or an output index 0..${outputs - 1}`;
  throw new UsageError(flag, `the model has no output "${t.length > 40 ? t.slice(0, 40) + '...' : t}" (expected ${known})`);
}

/** @throws UsageError naming `flag` unless 1 <= steps <= MAX_STEPS and whole. */
export function checkSteps(steps: number, flag: string): number {
  if (!Number.isInteger(steps) || steps < 1 || steps > MAX_STEPS) {
    throw new UsageError(flag, `must be a whole number from 1 to ${MAX_STEPS}, got ${steps}`);
  }
  return steps;
}

/**
 * A named baseline: `mean`, the model's stored z-score mean (the average input seen in
 * training), or `zeros`, raw zeros.
 * @throws UsageError naming `flag` when the model stores no mean (say what to pass instead).
 */
export function namedBaseline(doc: ModelDoc, name: 'mean' | 'zeros', flag: string): Float64Array {
  if (name === 'zeros') return new Float64Array(doc.inputs);
  const n = doc.normalise;
  if (n?.method === 'zscore' && n.mean) return Float64Array.from(n.mean);
  const why =
    n?.method === 'minmax' ? 'stores min-max statistics, not a mean' : n ? 'has no fitted normalisation statistics' : 'stores no normalisation statistics';
  throw new UsageError(flag, `the model ${why}, so there is no average input to compare with; pass zeros, or a file with one baseline row`);
}

/** @throws UsageError naming `flag` unless the baseline holds one finite value per input. */
export function checkBaselineRow(doc: ModelDoc, row: ArrayLike<number>, flag: string): Float64Array {
  if (row.length !== doc.inputs) throw new UsageError(flag, `the baseline has ${row.length} values, but the model takes ${doc.inputs} inputs`);
  const bad = Array.from(row).findIndex((v) => !Number.isFinite(v));
  if (bad >= 0) throw new UsageError(flag, `baseline value ${bad}${doc.features ? ` (${doc.features[bad]})` : ''} is ${row[bad]}, not a finite number`);
  return Float64Array.from(row);
}

export interface Explanation {
  /** rows x inputs. */
  readonly attributions: Float64Array;
  readonly score: Float64Array;
  readonly baselineScore: Float64Array;
  /** The explained output of each row. */
  readonly classes: Int32Array;
  /** Completeness gap of each row (relative; see completenessGaps). */
  readonly gaps: Float64Array;
  /** Steps each row was finally computed with. */
  readonly steps: Int32Array;
  /** Rows whose gap still passes GAP_TOLERANCE at the most steps tried. */
  readonly overTolerance: number;
}

/**
 * Integrated gradients for every row, with the steps raised (x4 at a time, up to
 * AUTO_STEPS_LIMIT or the steps asked for) for rows whose completeness gap passes 1%.
 * @example explainRows(doc, x, rows, { output: 'top', baseline, steps: 64 })
 */
export function explainRows(
  doc: ModelDoc,
  x: ArrayLike<number>,
  rows: number,
  opts: { output: ClassChoice; baseline: Float64Array; steps: number },
): Explanation {
  const n = doc.inputs;
  const classes = opts.output === 'top' ? topOutputs(doc, x, rows) : new Int32Array(rows).fill(opts.output);
  const first = integratedGradients(doc, x, rows, opts.baseline, classes, opts.steps);
  const attributions = first.attributions;
  const gaps = completenessGaps(first, n);
  const steps = new Int32Array(rows).fill(opts.steps);
  const limit = Math.max(AUTO_STEPS_LIMIT, opts.steps);
  for (let next = opts.steps * 4; ; next *= 4) {
    const redo = Array.from(gaps.keys()).filter((r) => gaps[r] > GAP_TOLERANCE);
    if (redo.length === 0 || opts.steps >= limit) break;
    const use = Math.min(next, limit);
    const sub = new Float64Array(redo.length * n);
    redo.forEach((r, i) => {
      for (let c = 0; c < n; c++) sub[i * n + c] = x[r * n + c];
    });
    const again = integratedGradients(
      doc,
      sub,
      redo.length,
      opts.baseline,
      Int32Array.from(redo, (r) => classes[r]),
      use,
    );
    const againGaps = completenessGaps(again, n);
    redo.forEach((r, i) => {
      attributions.set(again.attributions.subarray(i * n, (i + 1) * n), r * n);
      gaps[r] = againGaps[i];
      steps[r] = use;
    });
    if (use >= limit) break;
  }
  const overTolerance = gaps.reduce((count, g) => count + (g > GAP_TOLERANCE ? 1 : 0), 0);
  return { attributions, score: first.score, baselineScore: first.baselineScore, classes, gaps, steps, overTolerance };
}

/** Each row's top output (its first, for a model with one output). */
function topOutputs(doc: ModelDoc, x: ArrayLike<number>, rows: number): Int32Array {
  const y = referenceForward(
    doc,
    mat64(
      rows,
      doc.inputs,
      Float64Array.from({ length: rows * doc.inputs }, (_, i) => x[i]),
    ),
  ).y;
  return Int32Array.from({ length: rows }, (_, r) => {
    let best = 0;
    for (let c = 1; c < y.cols; c++) if (y.data[r * y.cols + c] > y.data[r * y.cols + best]) best = c;
    return best;
  });
}

/**
 * The features with the largest attributions of one row, largest magnitude first, in words:
 * "zone_3_temp +0.21, proof_min +0.09".
 */
export function topFeatures(doc: ModelDoc, attributions: Float64Array, row: number, count = 3): { name: string; value: number }[] {
  const n = doc.inputs;
  const names = doc.features ?? Array.from({ length: n }, (_, i) => `x${i}`);
  return Array.from({ length: n }, (_, c) => ({ name: names[c], value: attributions[row * n + c] }))
    .sort((a, b) => Math.abs(b.value) - Math.abs(a.value))
    .slice(0, count);
}
