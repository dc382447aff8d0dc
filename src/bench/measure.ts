/**
 * Measuring throughput and latency of a model on this machine: the timing loop, percentiles, and
 * `benchModel` for a user's own model (the CLI's bench command calls it).
 */
import { liveTensorCount, openRunner, useEngine, type EngineName } from '../engine/index.js';
import { modelWidths, type ModelDoc } from '../model/index.js';
import { multiplyAddsPerRow, seededRows } from './models.js';

export interface TimingOptions {
  /** Untimed calls first (JIT, caches, lazy kernel set-up). Default 2. */
  readonly warmupCalls?: number;
  /**
   * ...and untimed calls until this much time has passed. Default 0. V8 compiles WebAssembly
   * first with its baseline compiler and swaps in optimised code compiled in the background, so
   * the first calls can be slower and share the cores with that compilation.
   */
  readonly warmupMs?: number;
  /** Keep calling until this much time has passed... Default 1000 ms. */
  readonly minMs?: number;
  /** ...and at least this many calls. Default 3. */
  readonly minCalls?: number;
  /** Never more than this many calls. Default 100 000. */
  readonly maxCalls?: number;
}

export interface Timing {
  readonly calls: number;
  readonly totalMs: number;
  readonly rowsPerSec: number;
  /** Per-call latency percentiles (nearest rank). */
  readonly p50Ms: number;
  readonly p99Ms: number;
}

/**
 * The nearest-rank percentile of sorted values (q in [0, 1]).
 * @example percentile([1, 2, 3, 4], 0.5) // 2
 */
export function percentile(sorted: readonly number[], q: number): number {
  if (sorted.length === 0) return Number.NaN;
  const rank = Math.max(1, Math.ceil(q * sorted.length));
  return sorted[Math.min(sorted.length, rank) - 1];
}

/**
 * Time repeated calls of `fn`, each handling `rowsPerCall` rows.
 * @example const t = await timeCalls(() => session.run(x, 256), 256, { minMs: 500 }); t.rowsPerSec
 */
export async function timeCalls(fn: () => unknown, rowsPerCall: number, opts: TimingOptions = {}): Promise<Timing> {
  const warmup = opts.warmupCalls ?? 2;
  const minMs = opts.minMs ?? 1000;
  const minCalls = opts.minCalls ?? 3;
  const maxCalls = opts.maxCalls ?? 100_000;
  const warmupMs = opts.warmupMs ?? 0;
  const warmupStarted = performance.now();
  for (let i = 0; i < warmup || performance.now() - warmupStarted < warmupMs; i++) await fn();
  const latencies: number[] = [];
  const started = performance.now();
  let now = started;
  while (latencies.length < maxCalls && (latencies.length < minCalls || now - started < minMs)) {
    const t0 = performance.now();
    await fn();
    now = performance.now();
    latencies.push(now - t0);
  }
  const totalMs = now - started;
  latencies.sort((a, b) => a - b);
  return {
    calls: latencies.length,
    totalMs,
    rowsPerSec: (rowsPerCall * latencies.length * 1000) / totalMs,
    p50Ms: percentile(latencies, 0.5),
    p99Ms: percentile(latencies, 0.99),
  };
}

/** GFLOP/s for a dense stack, counting 2 floating-point operations per multiply-add. */
export function gflops(widths: readonly number[], rowsPerSec: number): number {
  return (2 * multiplyAddsPerRow(widths) * rowsPerSec) / 1e9;
}

export interface BenchRow {
  readonly engine: EngineName | 'fast' | 'int8';
  readonly batch: number;
  readonly rowsPerSec: number;
  readonly gflops: number;
  readonly p50Ms: number;
  readonly p99Ms: number;
  readonly calls: number;
  /** Resident set size after the measurement, in MiB. */
  readonly rssMiB: number;
  /** tfjs tensors alive after the measurement (the session's weights only, when nothing leaks). */
  readonly tensors: number;
}

export interface BenchModelOptions {
  /** Rows per call to measure. Default [1, 32, 256, 1024]. */
  readonly batches?: readonly number[];
  /** Engine to measure: a tfjs engine ('auto' = wasm, else js) or 'fast' (own SIMD kernel). Default 'auto'. */
  readonly engine?: EngineName | 'auto' | 'fast' | 'int8';
  /** Measuring time per batch size. Default 1000 ms. */
  readonly minMs?: number;
  /** Seed of the invented input rows. Default 1. */
  readonly seed?: number;
}

/**
 * Throughput and latency of `doc` on one engine, per batch size, on seeded input rows.
 * Switches the process's tfjs engine (tfjs has one per process).
 * @example
 * const rows = await benchModel(doc, { batches: [1, 256], engine: 'wasm' });
 * console.log(formatBenchRows(rows));
 * @throws ModelFileError when the document is not usable; Error when 'wasm' is asked for and cannot start.
 */
export async function benchModel(doc: ModelDoc, options: BenchModelOptions = {}): Promise<BenchRow[]> {
  const batches = options.batches ?? [1, 32, 256, 1024];
  for (const b of batches) if (!Number.isInteger(b) || b < 1) throw new RangeError(`benchModel: batch sizes must be positive integers, got ${b}`);
  const wanted = options.engine ?? 'auto';
  const engine = wanted === 'fast' || wanted === 'int8' ? wanted : await useEngine(wanted);
  const widths = modelWidths(doc);
  const runner = openRunner(doc, engine);
  const out: BenchRow[] = [];
  try {
    for (const batch of batches) {
      const x = seededRows(batch, runner.inputs, (options.seed ?? 1) + batch);
      const t = await timeCalls(() => runner.run(x, batch), batch, { minMs: options.minMs ?? 1000 });
      out.push({
        engine,
        batch,
        rowsPerSec: t.rowsPerSec,
        gflops: gflops(widths, t.rowsPerSec),
        p50Ms: t.p50Ms,
        p99Ms: t.p99Ms,
        calls: t.calls,
        rssMiB: process.memoryUsage().rss / 2 ** 20,
        tensors: liveTensorCount(),
      });
    }
  } finally {
    runner.dispose();
  }
  return out;
}

/** The measured cells of a bench row, as every bench table shows them, under `MEASURED_HEAD`. */
export function measuredCells(r: Pick<BenchRow, 'batch' | 'rowsPerSec' | 'gflops' | 'p50Ms' | 'p99Ms' | 'rssMiB' | 'tensors'>): string[] {
  return [String(r.batch), fmt(r.rowsPerSec, 0), fmt(r.gflops, 2), fmt(r.p50Ms, 3), fmt(r.p99Ms, 3), fmt(r.rssMiB, 0), String(r.tensors)];
}

export const MEASURED_HEAD = ['batch', 'rows/s', 'GFLOP/s', 'p50 ms', 'p99 ms', 'rss MiB', 'tensors'];

/** A plain-text table of bench rows, one line per batch size. */
export function formatBenchRows(rows: readonly BenchRow[]): string {
  return table(
    ['engine', ...MEASURED_HEAD],
    rows.map((r) => [r.engine, ...measuredCells(r)]),
  );
}

/** Fixed-width text table; numbers right-aligned. */
export function table(head: readonly string[], body: readonly (readonly string[])[]): string {
  const widths = head.map((h, i) => Math.max(h.length, ...body.map((r) => (r[i] ?? '').length)));
  const line = (cells: readonly string[]) => cells.map((c, i) => c.padStart(widths[i])).join('  ');
  return [line(head), line(widths.map((w) => '-'.repeat(w))), ...body.map(line)].join('\n');
}

/** A number with `digits` decimals and thousands separators (plain digits for small counts). */
export function fmt(value: number, digits: number): string {
  if (!Number.isFinite(value)) return '-';
  return value.toLocaleString('en-US', { minimumFractionDigits: digits, maximumFractionDigits: digits });
}
