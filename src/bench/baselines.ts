/**
 * The plain paths tendon is compared with, measured in the same run:
 * - per-layer tfjs-core ops on the JS CPU backend, written the way a user would (matMul, add,
 *   activation, one tensor per step, weights kept as tensors between calls);
 * - the float64 reference forward;
 * - numpy + OpenBLAS on the same shapes, through bench/numpy_baseline.py, when python3 has numpy.
 */
import { spawnSync } from 'node:child_process';
import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from '../model/tfjs-lazy.js';
import type { DenseLayer, ModelDoc } from '../model/index.js';
import { referenceForward, toMat64 } from '../reference/index.js';
import { useEngine } from '../engine/index.js';
import { timeCalls, type Timing } from './measure.js';
import { seededRows } from './models.js';

/** Forward a user would write with tfjs-core ops; dense layers with relu / linear / softmax only. */
export function plainTfjsForward(doc: ModelDoc): { run(x: Float32Array, rows: number): Float32Array; dispose(): void } {
  const dense = doc.layers.filter((l): l is DenseLayer => l.kind === 'dense');
  if (dense.length !== doc.layers.length) throw new RangeError('plainTfjsForward: dense layers only');
  let width = doc.inputs;
  const weights = dense.map((layer) => {
    const w = tfjs().tensor2d(layer.weight, [width, layer.size]);
    width = layer.size;
    return { w, b: tfjs().tensor1d(layer.bias), activation: layer.activation };
  });
  return {
    run(x, rows) {
      return tfjs().tidy(() => {
        let h: tf.Tensor2D = tfjs().tensor2d(x, [rows, doc.inputs]);
        for (const { w, b, activation } of weights) {
          h = tfjs().add(tfjs().matMul(h, w), b);
          if (activation === 'relu') h = tfjs().relu(h);
          else if (activation === 'softmax') h = tfjs().softmax(h);
        }
        return h.dataSync() as Float32Array;
      });
    },
    dispose() {
      for (const { w, b } of weights) tfjs().dispose([w, b]);
    },
  };
}

/** The float64 reference forward as a float32-in, float64-out call. */
export function referenceRunner(doc: ModelDoc): (x: Float32Array, rows: number) => Float64Array {
  return (x, rows) => referenceForward(doc, toMat64(x, rows, doc.inputs)).y.data;
}

export interface NumpyCase {
  readonly widths: readonly number[];
  readonly batches: readonly number[];
}

export type NumpyResult =
  | {
      readonly available: true;
      readonly version: string;
      readonly blas: string;
      /** Best of one thread and all threads, per case. */
      readonly timings: Map<string, Timing>;
      /** With OpenBLAS on every core (its default), per case. */
      readonly allThreads: Map<string, Timing>;
      /** The kernel set OpenBLAS chose (e.g. SkylakeX), or "unknown". */
      readonly kernels: string;
    }
  | { readonly available: false; readonly note: string };

/** Key of a numpy timing: widths and batch. */
export function numpyKey(widths: readonly number[], batch: number): string {
  return `${widths.join('-')}@${batch}`;
}

/**
 * The environment numpy runs in, as a user's numpy runs: no pinned OpenBLAS core type (which
 * would force, say, the AVX2 kernels on an AVX-512 machine) and no cache-size override; OpenBLAS
 * on `threads` threads, or its default (every core) when null.
 */
export function numpyEnv(threads: string | null): NodeJS.ProcessEnv {
  const env = { ...process.env };
  if (threads) env.OPENBLAS_NUM_THREADS = threads;
  else delete env.OPENBLAS_NUM_THREADS;
  delete env.OPENBLAS_CORETYPE;
  delete env.OPENBLAS_L2_SIZE;
  return env;
}

/**
 * Time the cases with numpy in child python3 processes, once with one OpenBLAS thread and once
 * with its default (every core), keeping the faster per case: on a busy machine OpenBLAS's
 * spinning threads can lose to one thread, and the comparison should be with numpy at its best.
 * `available: false` with a note when python3 or numpy is missing or the script fails.
 */
export function runNumpyBaseline(script: string, cases: readonly NumpyCase[], minMs: number): NumpyResult {
  const probe = spawnSync('python3', ['-c', 'import numpy'], { encoding: 'utf8' });
  if (probe.error || probe.status !== 0) {
    return {
      available: false,
      note: `numpy column skipped: python3 -c "import numpy" failed (${probe.error?.message ?? probe.stderr.trim().split('\n').pop()})`,
    };
  }
  const timings = new Map<string, Timing>();
  const allThreads = new Map<string, Timing>();
  let version = '';
  let blas = '';
  let kernels = 'unknown';
  for (const threads of ['1', '']) {
    const doc = numpyChild(script, cases, minMs, threads || null);
    if (typeof doc === 'string') return { available: false, note: `numpy column skipped: ${doc}` };
    version = doc.numpy;
    blas = doc.blas;
    kernels = doc.kernels ?? 'unknown';
    for (const r of doc.results) {
      const key = numpyKey(r.widths, r.batch);
      if (!threads)
        allThreads.set(key, { calls: r.calls, totalMs: (r.calls * r.batch * 1000) / r.rowsPerSec, rowsPerSec: r.rowsPerSec, p50Ms: r.p50Ms, p99Ms: r.p99Ms });
      const seen = timings.get(key);
      if (seen && seen.rowsPerSec >= r.rowsPerSec) continue;
      timings.set(key, { calls: r.calls, totalMs: (r.calls * r.batch * 1000) / r.rowsPerSec, rowsPerSec: r.rowsPerSec, p50Ms: r.p50Ms, p99Ms: r.p99Ms });
    }
  }
  return { available: true, version, blas: `${blas} (${kernels} kernels), best of 1 thread and all threads`, timings, allThreads, kernels };
}

/** One run of the numpy script on `threads` OpenBLAS threads (null: every core); what went wrong as a string. */
function numpyChild(script: string, cases: readonly NumpyCase[], minMs: number, threads: string | null): NumpyOutput | string {
  const env = numpyEnv(threads);
  const child = spawnSync('python3', [script], { input: JSON.stringify({ minMs, cases }), encoding: 'utf8', maxBuffer: 16 * 2 ** 20, env });
  if (child.error || child.status !== 0) return `${script} failed (${child.error?.message ?? child.stderr.trim().split('\n').pop()})`;
  const parsed: unknown = JSON.parse(child.stdout);
  return parsed as NumpyOutput;
}

/**
 * numpy's rows per second on one case with OpenBLAS on every core, or null when it cannot run:
 * the other side of a head-to-head measured in alternating rounds.
 */
export function numpyAllThreadsRate(script: string, widths: readonly number[], batch: number, minMs: number): number | null {
  const doc = numpyChild(script, [{ widths, batches: [batch] }], minMs, null);
  return typeof doc === 'string' ? null : (doc.results[0]?.rowsPerSec ?? null);
}

interface NumpyOutput {
  numpy: string;
  blas: string;
  kernels?: string;
  results: { widths: number[]; batch: number; rowsPerSec: number; p50Ms: number; p99Ms: number; calls: number }[];
}

export interface BaselineRow {
  readonly name: 'plain tfjs ops' | 'float64 reference';
  readonly batch: number;
  /** null when skipped (see the notes). */
  readonly rowsPerSec: number | null;
}

/** A baseline call predicted to take longer than this is skipped, so a report stays quick. */
const BASELINE_CALL_BUDGET_MS = 3000;

/**
 * The baselines of a user's model, on the same seeded rows as benchModel: plain tfjs-core ops on
 * the JS backend (dense models with relu / linear / softmax only) and the float64 reference.
 * Switches the process's tfjs backend to js; measure the engine afterwards.
 * @example const { rows, notes } = await benchBaselines(doc, { batches: [1, 256], minMs: 500 });
 */
export async function benchBaselines(
  doc: ModelDoc,
  opts: { batches: readonly number[]; minMs: number; seed?: number },
): Promise<{ rows: BaselineRow[]; notes: string[] }> {
  const rows: BaselineRow[] = [];
  const notes: string[] = [];
  const plainFits = doc.layers.every((l) => l.kind === 'dense' && ['relu', 'linear', 'softmax'].includes(l.activation));
  let plain: ReturnType<typeof plainTfjsForward> | null = null;
  if (plainFits) {
    await useEngine('js');
    plain = plainTfjsForward(doc);
    if (doc.normalise) notes.push("plain tfjs ops leave out the model's input normalisation (a small share of the work)");
  } else {
    notes.push('plain tfjs ops not run: written for dense layers with relu, linear or softmax only');
  }
  const ref = referenceRunner(doc);
  const rates: Record<BaselineRow['name'], number | null> = { 'plain tfjs ops': null, 'float64 reference': null };
  const timed = async (name: BaselineRow['name'], batch: number, fn: () => unknown): Promise<void> => {
    const seen = rates[name];
    if (seen !== null && (batch / seen) * 1000 > BASELINE_CALL_BUDGET_MS) {
      notes.push(`${name} at batch ${batch} skipped: one call predicted at ${Math.round((batch / seen) * 1000)} ms`);
      rows.push({ name, batch, rowsPerSec: null });
      return;
    }
    const t = await timeCalls(fn, batch, { minMs: opts.minMs, minCalls: 2, warmupCalls: 1 });
    rates[name] = t.rowsPerSec;
    rows.push({ name, batch, rowsPerSec: t.rowsPerSec });
  };
  try {
    for (const batch of [...opts.batches].sort((a, b) => a - b)) {
      const x = seededRows(batch, doc.inputs, (opts.seed ?? 1) + batch);
      if (plain) await timed('plain tfjs ops', batch, () => plain!.run(x, batch));
      await timed('float64 reference', batch, () => ref(x, batch));
    }
  } finally {
    plain?.dispose();
  }
  return { rows, notes };
}
