/**
 * Drift: incoming raw features compared with the normalisation statistics stored in the model,
 * the signal that the data have moved away from what the model learnt and a fine-tune is due.
 *
 * Drift is judged on the shift of the incoming MEAN, never on single values:
 * - z-score models: a feature is flagged when |mean_in - mean| / std > k, the shift measured in
 *   TRAINING standard deviations (default k = 3). Training sd rather than the standard error of
 *   the incoming mean: the standard error shrinks with the row count, so a long-running service
 *   would flag shifts too small to matter, while a shift of k training sd means the same thing
 *   after 100 rows and after a million. The model's own training rows give a shift of 0.
 * - min-max models (no mean or spread is stored): flagged when the incoming mean lies outside
 *   the [min, max] seen when the statistics were fitted.
 * - a feature that was constant when the statistics were fitted (std 0, or min = max) is mapped
 *   to 0 by the model and cannot move an answer: it is reported, never flagged.
 * Values beyond mean ± 6 std (z-score) or outside the seen range (min-max) are counted and shown
 * as a hint about tails and outliers, but one value does not flag a feature: every real file
 * has a few (a normal feature passes 6 sd about twice in a billion rows, real features far
 * more often).
 */
import type { ModelDoc, Normalisation } from '../model/index.js';
import { baselineNormalisation } from '../transform/index.js';
import { FeatureMoments } from '../model/moments.js';

/** Default number of stored standard deviations the incoming mean may move. */
export const DEFAULT_DRIFT_K = 3;
/** z-score values this many standard deviations from the stored mean count as out of range. */
export const ZSCORE_RANGE_SD = 6;

export interface FeatureDrift {
  readonly index: number;
  readonly name: string;
  readonly meanIn: number;
  readonly stdIn: number;
  readonly minIn: number;
  readonly maxIn: number;
  /** |mean_in - mean| / std for z-score models; null for min-max models, constant features or no rows. */
  readonly meanShiftSd: number | null;
  /** Values outside the stored range (min-max) or mean ± 6 std (z-score); shown, never flagged on their own. */
  readonly outOfRange: number;
  /** The feature did not vary when the statistics were fitted: the model ignores it, so it is never flagged. */
  readonly constantInTraining: boolean;
  readonly drifted: boolean;
  /** Why it is flagged, empty when it is not. */
  readonly reason: string;
}

export interface DriftReport {
  readonly method: Normalisation['method'];
  readonly rows: number;
  readonly k: number;
  readonly features: FeatureDrift[];
  /** Features flagged, by name. */
  readonly drifted: string[];
}

type Baseline = { method: 'zscore'; mean: Float64Array; std: Float64Array } | { method: 'minmax'; min: Float64Array; max: Float64Array };

function baselineOf(norm: Normalisation | null): Baseline | null {
  if (norm?.method === 'zscore' && norm.mean && norm.std) return { method: 'zscore', mean: norm.mean, std: norm.std };
  if (norm?.method === 'minmax' && norm.min && norm.max) return { method: 'minmax', min: norm.min, max: norm.max };
  return null;
}

/**
 * Streaming drift check for one model. Feed it raw rows as they are scored, read a report at any time.
 * @example
 * const drift = DriftMonitor.forModel(doc); // null when the model has no fitted statistics
 * drift?.add(x, rows);
 * drift?.report().drifted // ['zone1_temp_c']
 */
export class DriftMonitor {
  private readonly moments: FeatureMoments;
  private readonly outside: Float64Array;

  private constructor(
    private readonly baseline: Baseline,
    readonly names: readonly string[],
    readonly k: number,
  ) {
    this.moments = new FeatureMoments(names.length);
    this.outside = new Float64Array(names.length);
  }

  /** A monitor for `doc`, or null when it has no fitted normalisation statistics (kept or folded). */
  static forModel(doc: ModelDoc, options: { k?: number } = {}): DriftMonitor | null {
    const baseline = baselineOf(baselineNormalisation(doc));
    if (!baseline) return null;
    const k = options.k ?? DEFAULT_DRIFT_K;
    if (!(k > 0) || !Number.isFinite(k)) throw new RangeError(`drift threshold k must be a positive number, got ${k}`);
    const names = doc.features ?? Array.from({ length: doc.inputs }, (_, i) => `input_${i}`);
    return new DriftMonitor(baseline, names, k);
  }

  get rows(): number {
    return this.moments.count;
  }

  /** Add `rows` raw rows (row-major, one value per input). */
  add(x: ArrayLike<number>, rows: number): void {
    this.moments.add(x, rows);
    const w = this.names.length;
    const b = this.baseline;
    for (let r = 0; r < rows; r++) {
      for (let c = 0; c < w; c++) {
        const v = x[r * w + c];
        // Incoming rows are float32: compare with the float32 rounding of the stored range, so a
        // value that was at the edge when the statistics were fitted does not count as outside.
        const outside = b.method === 'zscore' ? Math.abs(v - b.mean[c]) > ZSCORE_RANGE_SD * b.std[c] : v < Math.fround(b.min[c]) || v > Math.fround(b.max[c]);
        if (outside) this.outside[c]++;
      }
    }
  }

  reset(): void {
    this.moments.reset();
    this.outside.fill(0);
  }

  report(): DriftReport {
    const m = this.moments;
    const b = this.baseline;
    const features = this.names.map((name, c): FeatureDrift => {
      const constant = b.method === 'zscore' ? b.std[c] === 0 : b.max[c] === b.min[c];
      let shift: number | null = null;
      const reasons: string[] = [];
      if (m.count > 0 && !constant) {
        if (b.method === 'zscore') {
          shift = Math.abs(m.mean[c] - b.mean[c]) / b.std[c];
          if (shift > this.k) reasons.push(`mean moved ${shift.toFixed(1)} sd`);
        } else if (m.mean[c] < Math.fround(b.min[c]) || m.mean[c] > Math.fround(b.max[c])) {
          reasons.push(
            `mean ${Number(m.mean[c].toPrecision(4))} outside the seen range [${Number(b.min[c].toPrecision(4))}, ${Number(b.max[c].toPrecision(4))}]`,
          );
        }
      }
      return {
        index: c,
        name,
        meanIn: m.count > 0 ? m.mean[c] : NaN,
        stdIn: m.std(c),
        minIn: m.min[c],
        maxIn: m.max[c],
        meanShiftSd: shift,
        outOfRange: this.outside[c],
        constantInTraining: constant,
        drifted: reasons.length > 0,
        reason: reasons.join('; '),
      };
    });
    return { method: b.method, rows: m.count, k: this.k, features, drifted: features.filter((f) => f.drifted).map((f) => f.name) };
  }
}

/**
 * The report as a table for people (what `tendon score --drift` prints to stderr).
 * @example describeDrift(monitor.report())
 */
export function describeDrift(report: DriftReport): string {
  const header = ['feature', 'mean in', 'sd in', 'min in', 'max in', 'shift (sd)', 'out of range', 'drift'];
  const num = (v: number | null) => (v === null || Number.isNaN(v) ? '-' : Number.isFinite(v) ? Number(v.toPrecision(4)).toString() : String(v));
  const rows = report.features.map((f) => [
    f.name,
    num(f.meanIn),
    num(f.stdIn),
    num(f.minIn),
    num(f.maxIn),
    num(f.meanShiftSd),
    String(f.outOfRange),
    f.drifted ? f.reason : f.constantInTraining ? 'ok (constant in training: the model ignores it)' : 'ok',
  ]);
  const widths = header.map((h, i) => Math.max(h.length, ...rows.map((r) => r[i].length)));
  const line = (cells: string[]) =>
    cells
      .map((cell, i) => (i === 0 || i === cells.length - 1 ? cell.padEnd(widths[i]) : cell.padStart(widths[i])))
      .join('  ')
      .trimEnd();
  const summary =
    report.drifted.length === 0
      ? 'no feature has drifted'
      : `${report.drifted.length} feature${report.drifted.length > 1 ? 's have' : ' has'} drifted (${report.drifted.join(', ')}): time to fine-tune on fresh rows`;
  const rule =
    report.method === 'zscore'
      ? `a feature drifts when its incoming mean moves more than ${report.k} training sd; "out of range" counts values beyond mean ± ${ZSCORE_RANGE_SD} sd, shown only`
      : 'a feature drifts when its incoming mean leaves the range seen in training; "out of range" counts single values outside it, shown only';
  return (
    [
      `drift: ${report.rows} rows against the model's ${report.method} statistics (${rule})`,
      line(header),
      line(widths.map((w) => '-'.repeat(w))),
      ...rows.map(line),
      summary,
    ].join('\n') + '\n'
  );
}
