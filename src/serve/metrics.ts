/**
 * The endpoint's counters, rendered in the Prometheus text exposition format (version 0.0.4):
 * `# HELP name text`, `# TYPE name counter|gauge|summary`, then `name{label="value"} number`
 * lines. Latency is a summary whose quantiles are computed over the most recent requests.
 */
import type { DriftReport } from '../drift/index.js';

/** Recent latencies kept for the quantiles: enough for stable tails, bounded memory. */
const LATENCY_WINDOW = 4096;
const QUANTILES = [0.5, 0.9, 0.99] as const;

export const METRICS_CONTENT_TYPE = 'text/plain; version=0.0.4; charset=utf-8';

export interface ModelInfo {
  readonly checksum: string;
  readonly inputs: number;
  readonly outputs: number;
  readonly source: string;
}

/**
 * Request, row, error, latency, swap and drift counters of one endpoint.
 * @example
 * const c = new ServiceCounters();
 * c.request('/v1/score', 200, 0.004, 3);
 * c.render() // "# HELP tendon_requests_total ..."
 */
export class ServiceCounters {
  private readonly requests = new Map<string, number>();
  private readonly errors = new Map<number, number>();
  private rowsScored = 0;
  private readonly latencies = new Float64Array(LATENCY_WINDOW);
  private latencyCount = 0;
  private latencySum = 0;
  private swaps = 0;
  private refusedSwaps = 0;
  model: ModelInfo | null = null;
  private driftReport: DriftReport | null = null;
  private driftSource: (() => DriftReport | null) | null = null;

  /** The drift report the counters show: as set, or read from the source given to `driftFrom` when asked. */
  get drift(): DriftReport | null {
    return this.driftSource ? this.driftSource() : this.driftReport;
  }

  set drift(report: DriftReport | null) {
    this.driftSource = null;
    this.driftReport = report;
  }

  /** Read the drift report from `source` only when it is asked for (a report per request would cost every request). */
  driftFrom(source: () => DriftReport | null): void {
    this.driftSource = source;
  }

  /** Count one answered request; `seconds` from the first byte read to the last byte written. */
  request(route: string, status: number, seconds: number, rows = 0): void {
    const key = `${route}\u0000${status}`;
    this.requests.set(key, (this.requests.get(key) ?? 0) + 1);
    if (status >= 400) this.errors.set(status, (this.errors.get(status) ?? 0) + 1);
    this.rowsScored += rows;
    this.latencies[this.latencyCount % LATENCY_WINDOW] = seconds;
    this.latencyCount++;
    this.latencySum += seconds;
  }

  swapped(ok: boolean): void {
    if (ok) this.swaps++;
    else this.refusedSwaps++;
  }

  /** Nearest-rank quantile over the recent window; NaN before any request. */
  quantile(q: number): number {
    const n = Math.min(this.latencyCount, LATENCY_WINDOW);
    if (n === 0) return NaN;
    const sorted = this.latencies.slice(0, n).sort();
    return sorted[Math.min(n - 1, Math.max(0, Math.ceil(q * n) - 1))];
  }

  /** The exposition text; `runtime` adds the process's live tfjs tensors and resident memory. */
  render(runtime?: { readonly tensors: number; readonly residentBytes: number }): string {
    const out: string[] = [];
    const family = (name: string, type: 'counter' | 'gauge' | 'summary', help: string) =>
      out.push(`# HELP ${name} ${escapeHelp(help)}`, `# TYPE ${name} ${type}`);

    family('tendon_requests_total', 'counter', 'Requests answered, by route and HTTP status.');
    for (const [key, n] of [...this.requests].sort(([a], [b]) => (a < b ? -1 : 1))) {
      const [route, status] = key.split('\u0000');
      out.push(sample('tendon_requests_total', { route, status }, n));
    }
    family('tendon_errors_total', 'counter', 'Requests answered with a 4xx or 5xx status, by status.');
    for (const [status, n] of [...this.errors].sort(([a], [b]) => a - b)) out.push(sample('tendon_errors_total', { status: String(status) }, n));
    family('tendon_rows_total', 'counter', 'Rows scored.');
    out.push(sample('tendon_rows_total', {}, this.rowsScored));

    family('tendon_request_seconds', 'summary', `Time to answer a request, quantiles over the last ${LATENCY_WINDOW} requests.`);
    for (const q of QUANTILES) out.push(sample('tendon_request_seconds', { quantile: String(q) }, this.quantile(q)));
    out.push(sample('tendon_request_seconds_sum', {}, this.latencySum));
    out.push(sample('tendon_request_seconds_count', {}, this.latencyCount));

    family('tendon_model_swaps_total', 'counter', 'Model files swapped in, by outcome.');
    out.push(sample('tendon_model_swaps_total', { outcome: 'swapped' }, this.swaps));
    out.push(sample('tendon_model_swaps_total', { outcome: 'refused' }, this.refusedSwaps));

    if (this.model) {
      family('tendon_model_info', 'gauge', 'The model being served; always 1, the facts are labels.');
      const m = this.model;
      out.push(sample('tendon_model_info', { checksum: m.checksum, inputs: String(m.inputs), outputs: String(m.outputs), source: m.source }, 1));
    }

    if (runtime) {
      family('tendon_engine_tensors', 'gauge', 'tfjs tensors alive in this process (flat over time when nothing leaks).');
      out.push(sample('tendon_engine_tensors', {}, runtime.tensors));
      family('tendon_resident_bytes', 'gauge', 'Resident memory of this process.');
      out.push(sample('tendon_resident_bytes', {}, runtime.residentBytes));
    }

    const d = this.drift;
    if (d) {
      family('tendon_drift_rows_total', 'counter', "Rows compared with the model's normalisation statistics since the model was loaded.");
      out.push(sample('tendon_drift_rows_total', {}, d.rows));
      family('tendon_drift_mean_shift_sd', 'gauge', 'Distance of the incoming mean from the stored mean, in stored standard deviations (z-score models).');
      for (const f of d.features) if (f.meanShiftSd !== null) out.push(sample('tendon_drift_mean_shift_sd', { feature: f.name }, f.meanShiftSd));
      family('tendon_drift_out_of_range_total', 'counter', 'Incoming values outside the stored range (min-max) or mean +/- 6 sd (z-score).');
      for (const f of d.features) out.push(sample('tendon_drift_out_of_range_total', { feature: f.name }, f.outOfRange));
      family('tendon_drift_flagged', 'gauge', 'Whether a feature has drifted (1) or not (0).');
      for (const f of d.features) out.push(sample('tendon_drift_flagged', { feature: f.name }, f.drifted ? 1 : 0));
    }
    return out.join('\n') + '\n';
  }
}

function sample(name: string, labels: Record<string, string>, value: number): string {
  const pairs = Object.entries(labels).map(([k, v]) => `${k}="${escapeLabel(v)}"`);
  return `${name}${pairs.length > 0 ? `{${pairs.join(',')}}` : ''} ${formatValue(value)}`;
}

/** The exposition format spells the special values NaN, +Inf and -Inf. */
function formatValue(v: number): string {
  if (Number.isNaN(v)) return 'NaN';
  if (v === Infinity) return '+Inf';
  if (v === -Infinity) return '-Inf';
  return String(v);
}

/** Label values escape backslash, double quote and line feed. */
function escapeLabel(v: string): string {
  return v.replace(/\\/g, '\\\\').replace(/"/g, '\\"').replace(/\n/g, '\\n');
}

/** HELP text escapes backslash and line feed. */
function escapeHelp(v: string): string {
  return v.replace(/\\/g, '\\\\').replace(/\n/g, '\\n');
}
