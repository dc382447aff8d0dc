/**
 * The fixed benchmark suite behind `npm run bench`: three network sizes, batch sizes from 1 to
 * 4096, both engines, 1 and 2 workers, the micro-batcher under concurrent callers, a training
 * step, and a leak check; side by side with plain tfjs ops, the float64 reference and numpy.
 *
 * Calls that would take longer than a per-call budget (the plain JS paths on big batches) are
 * skipped with a note, predicted from the throughput measured at the previous batch size.
 */
import { readFileSync } from 'node:fs';
import { cpus, availableParallelism } from 'node:os';
import * as tf from '@tensorflow/tfjs-core';
import { bestInt8Arith, engineFallbackReason, Int8Session, kernelDescription, openRunner, SharedSession, useEngine, type EngineName, type Runner } from '../engine/index.js';
import { decodeModel, encodeModel } from '../format/index.js';
import { wasmSimdAvailable } from '../engine/fast/dense-kernel.js';
import type { ModelDoc } from '../model/index.js';
import { MicroBatcher } from '../serve/batcher.js';
import { WorkerPool } from '../serve/pool.js';
import { tune } from '../train/tune.js';
import { numpyKey, plainTfjsForward, referenceRunner, runNumpyBaseline, type NumpyResult } from './baselines.js';
import { fmt, gflops, percentile, table, timeCalls, type Timing } from './measure.js';
import { denseStackDoc, seededRows } from './models.js';

export interface SuiteOptions {
  /** Fewer batch sizes, shorter timings, a 10 000-call leak check. */
  readonly quick: boolean;
  /** bench/numpy_baseline.py. */
  readonly numpyScript: string;
  /** The built worker (dist/worker.js). */
  readonly workerScript: string | URL;
  /** Progress lines. */
  readonly log: (line: string) => void;
}

export interface SuiteRow {
  readonly section: 'engine' | 'threads' | 'pool' | 'batcher' | 'train' | 'leak';
  readonly network: string;
  /** 'js' | 'wasm', or a baseline's name for reference rows. */
  readonly engine: string;
  readonly workers: number;
  readonly batch: number;
  readonly rowsPerSec: number;
  readonly gflops: number;
  readonly p50Ms: number;
  readonly p99Ms: number;
  readonly rssMiB: number;
  readonly tensors: number;
  /** Our rows/s over the baseline's, measured in this run; NaN when the baseline was not run. */
  readonly vsPlainTfjs: number;
  readonly vsReference: number;
  readonly vsNumpy: number;
  readonly note: string;
}

export interface TargetCheck {
  readonly target: string;
  readonly reached: string;
  readonly met: boolean | null;
}

export interface Machine {
  readonly cpu: string;
  readonly cores: number;
  readonly node: string;
  readonly numpy: string;
  /** The CPU's vector extensions that matter here (from /proc/cpuinfo), or "unknown". */
  readonly vector: string;
}

export interface SuiteResult {
  readonly rows: SuiteRow[];
  readonly baselines: { network: string; batch: number; plainTfjs: Timing | null; reference: Timing | null; numpy: Timing | null }[];
  readonly targets: TargetCheck[];
  readonly notes: string[];
  readonly machine: Machine;
}

const NETWORKS: { name: string; widths: number[]; last: 'softmax' | 'linear' }[] = [
  { name: 'tabular 7-32-3', widths: [7, 32, 3], last: 'softmax' },
  { name: 'mnist 784-512-256-10', widths: [784, 512, 256, 10], last: 'linear' },
  { name: 'wide 256-2048-2048-10', widths: [256, 2048, 2048, 10], last: 'linear' },
];
const MID = NETWORKS[1];

/** The tfjs engines and our own kernel ('fast'). */
type SuiteEngine = EngineName | 'fast';

/** A runner on an engine; tfjs engines switch the process backend first. */
async function openSuiteRunner(engine: SuiteEngine, doc: ModelDoc): Promise<Runner> {
  if (engine !== 'fast') await useEngine(engine);
  return openRunner(doc, engine);
}

function rss(): number {
  return process.memoryUsage().rss / 2 ** 20;
}

/** Run the whole suite; returns every row, the baselines, the target checks and notes. */
export async function runBenchSuite(opts: SuiteOptions): Promise<SuiteResult> {
  const quick = opts.quick;
  const batches = quick ? [1, 256, 4096] : [1, 16, 256, 1024, 4096];
  const minMs = quick ? 300 : 800;
  const callBudgetMs = quick ? 1500 : 4000;
  const notes: string[] = [];
  const rows: SuiteRow[] = [];
  const log = opts.log;

  // numpy first, alone, so its threads do not compete with ours.
  log('numpy + OpenBLAS baseline...');
  const numpy: NumpyResult = runNumpyBaseline(
    opts.numpyScript,
    NETWORKS.map((n) => ({ widths: n.widths, batches })),
    minMs,
  );
  if (!numpy.available) notes.push(numpy.note);

  const docs = new Map(NETWORKS.map((n) => [n.name, denseStackDoc(n.widths, 7, 'relu', n.last)]));
  const baselines: SuiteResult['baselines'] = [];
  const baselineOf = (network: string, batch: number) => baselines.find((b) => b.network === network && b.batch === batch);

  /** Time fn unless one call is predicted to exceed the budget; null when skipped. */
  const budgeted = async (label: string, predictedRowsPerSec: number | null, batch: number, fn: () => unknown): Promise<Timing | null> => {
    if (predictedRowsPerSec !== null && (batch / predictedRowsPerSec) * 1000 > callBudgetMs) {
      notes.push(`${label} at batch ${batch} skipped: one call predicted at ${fmt((batch / predictedRowsPerSec) * 1000, 0)} ms, over the ${callBudgetMs} ms budget`);
      return null;
    }
    return timeCalls(fn, batch, { minMs, minCalls: 2, warmupCalls: 1 });
  };

  // Baselines on the JS backend (plain tfjs ops, float64 reference), then our engines.
  await useEngine('js');
  for (const net of NETWORKS) {
    const doc = docs.get(net.name)!;
    const plain = plainTfjsForward(doc);
    const ref = referenceRunner(doc);
    let plainRate: number | null = null;
    let refRate: number | null = null;
    for (const batch of batches) {
      log(`baselines ${net.name} batch ${batch}`);
      const x = seededRows(batch, net.widths[0], batch);
      const p = await budgeted(`plain tfjs ops (${net.name})`, plainRate, batch, () => plain.run(x, batch));
      const r = await budgeted(`float64 reference (${net.name})`, refRate, batch, () => ref(x, batch));
      plainRate = p?.rowsPerSec ?? plainRate;
      refRate = r?.rowsPerSec ?? refRate;
      const np = numpy.available ? numpy.timings.get(numpyKey(net.widths, batch)) ?? null : null;
      baselines.push({ network: net.name, batch, plainTfjs: p, reference: r, numpy: np });
    }
    plain.dispose();
  }

  const engines: SuiteEngine[] = ['js'];
  try {
    await useEngine('wasm');
    engines.push('wasm');
  } catch (error) {
    notes.push(`wasm engine unavailable: ${error instanceof Error ? error.message.split('\n')[0] : String(error)}`);
  }
  if (wasmSimdAvailable()) engines.push('fast');
  else notes.push('fast engine (own WebAssembly SIMD kernel) unavailable: this runtime has no WebAssembly SIMD');

  const row = (r: Omit<SuiteRow, 'rssMiB' | 'tensors' | 'vsPlainTfjs' | 'vsReference' | 'vsNumpy'>, network: string, batch: number): SuiteRow => {
    const b = baselineOf(network, batch);
    return {
      ...r,
      rssMiB: rss(),
      tensors: tf.memory().numTensors,
      vsPlainTfjs: b?.plainTfjs ? r.rowsPerSec / b.plainTfjs.rowsPerSec : Number.NaN,
      vsReference: b?.reference ? r.rowsPerSec / b.reference.rowsPerSec : Number.NaN,
      vsNumpy: b?.numpy ? r.rowsPerSec / b.numpy.rowsPerSec : Number.NaN,
    };
  };

  for (const engine of engines) {
    for (const net of NETWORKS) {
      const session = await openSuiteRunner(engine, docs.get(net.name)!);
      let rate: number | null = null;
      for (const batch of batches) {
        log(`engine ${engine} ${net.name} batch ${batch}`);
        const x = seededRows(batch, net.widths[0], batch);
        const t = await budgeted(`engine ${engine} (${net.name})`, rate, batch, () => session.run(x, batch));
        if (!t) continue;
        rate = t.rowsPerSec;
        rows.push(row({ section: 'engine', network: net.name, engine, workers: 0, batch, rowsPerSec: t.rowsPerSec, gflops: gflops(net.widths, t.rowsPerSec), p50Ms: t.p50Ms, p99Ms: t.p99Ms, note: 'in-process session' }, net.name, batch));
      }
      session.dispose();
    }
  }
  // Shared-memory threads on the middle network at batch 256: float32 (the fast kernel) and int8
  // (the same network stored as i8), on one thread and on two; and int8 on single rows.
  const int8Arith = bestInt8Arith();
  if (int8Arith !== null) {
    const f32Doc = docs.get(MID.name)!;
    const i8Doc = decodeModel(encodeModel({ ...f32Doc, storage: 'i8' }), '(benchmark model stored as i8)').doc;
    const cases: { name: string; threads: number; batch: number; open: (threads: number) => { run(x: Float32Array, n: number): Float32Array; ready(): Promise<void>; dispose(): void } }[] = [];
    for (const threads of [1, 2]) {
      cases.push({ name: 'fast', threads, batch: 256, open: (t) => new SharedSession(f32Doc, { arith: 'f32', threads: t }) });
      cases.push({ name: 'int8', threads, batch: 256, open: (t) => new Int8Session(i8Doc, { threads: t }) });
    }
    cases.push({ name: 'int8', threads: 1, batch: 1, open: (t) => new Int8Session(i8Doc, { threads: t }) });
    for (const c of cases) {
      log(`threads ${c.name} x${c.threads} batch ${c.batch}`);
      const session = c.open(c.threads);
      await session.ready();
      const x = seededRows(c.batch, MID.widths[0], c.batch);
      const t = await budgeted(`threads ${c.name} x${c.threads}`, null, c.batch, () => session.run(x, c.batch));
      session.dispose();
      if (!t) continue;
      const kernel = c.name === 'int8' ? kernelDescription('int8') : kernelDescription('fast');
      rows.push(row({ section: 'threads', network: MID.name, engine: c.name, workers: c.threads, batch: c.batch, rowsPerSec: t.rowsPerSec, gflops: gflops(MID.widths, t.rowsPerSec), p50Ms: t.p50Ms, p99Ms: t.p99Ms, note: `${kernel}; shared memory, ${c.threads} thread${c.threads > 1 ? 's' : ''}` }, MID.name, c.batch));
    }
  } else notes.push('int8 and shared-memory thread rows skipped: this runtime has no WebAssembly SIMD');

  // The engine the targets are judged on: the fastest at 784-512-256-10, batch 256.
  const at256 = (e: SuiteEngine) => rows.find((r) => r.section === 'engine' && r.engine === e && r.network === MID.name && r.batch === 256)?.rowsPerSec ?? 0;
  const best: SuiteEngine = engines.reduce((a, b) => (at256(b) > at256(a) ? b : a));
  notes.push(`targets judged on the ${best} engine (fastest at ${MID.name}, batch 256)`);

  // Worker pool on the middle network.
  const poolBatches = quick ? [256] : [256, 4096];
  const poolEngines: SuiteEngine[] = quick ? [best] : engines;
  for (const engine of poolEngines) {
    for (const workers of [1, 2]) {
      log(`pool ${engine} x${workers}`);
      const pool = await WorkerPool.open(docs.get(MID.name)!, { size: workers, engine, workerScript: opts.workerScript, minShareRows: 16 });
      let rate: number | null = null;
      for (const batch of poolBatches) {
        const x = seededRows(batch, MID.widths[0], batch);
        const t = await budgeted(`pool ${engine} x${workers}`, rate, batch, () => pool.run(x, batch));
        if (!t) continue;
        rate = t.rowsPerSec;
        rows.push(row({ section: 'pool', network: MID.name, engine, workers, batch, rowsPerSec: t.rowsPerSec, gflops: gflops(MID.widths, t.rowsPerSec), p50Ms: t.p50Ms, p99Ms: t.p99Ms, note: 'worker threads' }, MID.name, batch));
      }
      await pool.close();
    }
  }

  // The micro-batcher: concurrent single-row callers, in-process session on the best engine.
  for (const net of [NETWORKS[0], MID]) {
    const session = await openSuiteRunner(best, docs.get(net.name)!);
    const callers = 64;
    log(`micro-batcher ${net.name}, ${callers} callers`);
    const batcher = new MicroBatcher((x, n) => session.run(x, n), { width: net.widths[0], maxBatchRows: 64, maxWaitMs: 1, maxQueueRows: 4096 });
    const one = seededRows(1, net.widths[0], 3);
    const latencies: number[] = [];
    const until = performance.now() + minMs * 2;
    const started = performance.now();
    await Promise.all(
      Array.from({ length: callers }, async () => {
        while (performance.now() < until) {
          const t0 = performance.now();
          await batcher.submit(one);
          latencies.push(performance.now() - t0);
        }
      }),
    );
    const seconds = (performance.now() - started) / 1000;
    await batcher.close();
    session.dispose();
    latencies.sort((a, b) => a - b);
    const rps = latencies.length / seconds;
    rows.push(row({ section: 'batcher', network: net.name, engine: best, workers: 0, batch: 1, rowsPerSec: rps, gflops: gflops(net.widths, rps), p50Ms: percentile(latencies, 0.5), p99Ms: percentile(latencies, 0.99), note: `${callers} concurrent single-row callers, max batch 64, max wait 1 ms` }, net.name, 1));
  }

  // Training: 784-256-10 at batch 64, one epoch, on each tfjs engine (the fast kernel is inference only).
  const trainWidths = [784, 256, 10];
  for (const engine of engines.filter((e): e is EngineName => e !== 'fast')) {
    await useEngine(engine);
    const n = engine === 'js' ? (quick ? 256 : 1024) : quick ? 1024 : 4096;
    log(`training ${engine} ${n} rows`);
    const doc: ModelDoc = denseStackDoc(trainWidths, 3, 'relu', 'softmax');
    const x = seededRows(n, 784, 4);
    const y = Int32Array.from({ length: n }, (_, i) => i % 10);
    const result = await tune(doc, { x, rows: n, y }, { epochs: 1, batch: 64, lr: 0.01, optimizer: 'sgd', seed: 1, path: 'engine' });
    const rps = result.history[0]?.rowsPerSecond ?? Number.NaN;
    // A training step is about 3x the forward multiply-adds (forward, input gradient, weight gradient).
    rows.push(row({ section: 'train', network: 'train 784-256-10', engine, workers: 0, batch: 64, rowsPerSec: rps, gflops: 3 * gflops(trainWidths, rps), p50Ms: Number.NaN, p99Ms: Number.NaN, note: `one epoch of ${n} rows, sgd, steps only` }, 'train 784-256-10', 64));
  }

  if (engines.includes('fast')) {
    // The same epoch through tune on the fast path (SimdTrainer), plain SGD and Adam.
    const n = quick ? 2048 : 8192;
    const x = seededRows(n, 784, 4);
    const y = Int32Array.from({ length: n }, (_, i) => i % 10);
    for (const optimizer of ['sgd', 'adam'] as const) {
      log(`training fast ${n} rows, ${optimizer}`);
      const doc = denseStackDoc(trainWidths, 3, 'relu', 'softmax');
      const result = await tune(doc, { x, rows: n, y }, { epochs: 2, batch: 64, lr: 0.01, optimizer, seed: 1, path: 'fast' });
      // The second epoch: the kernel is compiled and warm.
      const rps = result.history[1]?.rowsPerSecond ?? Number.NaN;
      rows.push(row({ section: 'train', network: 'train 784-256-10', engine: 'fast', workers: 0, batch: 64, rowsPerSec: rps, gflops: 3 * gflops(trainWidths, rps), p50Ms: Number.NaN, p99Ms: Number.NaN, note: `second epoch of ${n} rows through tune, ${optimizer}, steps only` }, 'train 784-256-10', 64));
    }
  }

  // Leak check: many small calls must leave the tensor count unchanged and rss flat.
  for (const engine of engines.filter((e): e is EngineName => e !== 'fast')) {
    // The leak check is about tfjs tensors, so it runs on the tfjs engines.
    await useEngine(engine);
    const calls = quick ? 10_000 : 100_000;
    const net = NETWORKS[0];
    const session = openRunner(docs.get(net.name)!, engine);
    const x = seededRows(1, net.widths[0], 8);
    for (let i = 0; i < 1000; i++) session.run(x, 1);
    const tensorsBefore = tf.memory().numTensors;
    const rssBefore = rss();
    log(`leak check: ${calls} calls`);
    const t0 = performance.now();
    for (let i = 0; i < calls; i++) session.run(x, 1);
    const seconds = (performance.now() - t0) / 1000;
    const tensorsAfter = tf.memory().numTensors;
    const rssAfter = rss();
    session.dispose();
    notes.push(`leak check (${engine}, ${net.name}, ${calls} calls of run): tensors ${tensorsBefore} -> ${tensorsAfter}, rss ${fmt(rssBefore, 1)} -> ${fmt(rssAfter, 1)} MiB`);
    rows.push(row({ section: 'leak', network: net.name, engine, workers: 0, batch: 1, rowsPerSec: calls / seconds, gflops: gflops(net.widths, calls / seconds), p50Ms: Number.NaN, p99Ms: Number.NaN, note: `tensors ${tensorsBefore}->${tensorsAfter}, rss ${fmt(rssBefore, 0)}->${fmt(rssAfter, 0)} MiB` }, net.name, 1));
  }

  const fallback = engineFallbackReason();
  if (fallback) notes.push(fallback);
  const machine: Machine = {
    cpu: cpus()[0]?.model.trim() ?? 'unknown',
    cores: availableParallelism(),
    node: process.version,
    numpy: numpy.available ? `numpy ${numpy.version} (${numpy.blas})` : 'numpy not available',
    vector: vectorFeatures(),
  };
  const numpyAll256 = numpy.available ? numpy.allThreads.get(numpyKey(MID.widths, 256)) ?? null : null;
  return { rows, baselines, targets: [...checkTargets(rows, baselines, best), ...threadTargets(rows, baselines, numpyAll256)], notes, machine };
}

/** avx2 / avx512f / avx512_vnni / avx_vnni and the like, as /proc/cpuinfo lists them; "unknown" elsewhere. */
function vectorFeatures(): string {
  try {
    const flags = /^flags\s*:(.*)$/m.exec(readFileSync('/proc/cpuinfo', 'utf8'))?.[1].trim().split(/\s+/) ?? [];
    const wanted = flags.filter((f) => /^(sse4_2|avx|avx2|fma|avx512f|avx512bw|avx512vl|avx512_vnni|avx_vnni|amx_int8)$/.test(f));
    return wanted.length ? wanted.join(' ') : 'unknown';
  } catch {
    return 'unknown';
  }
}

/** The integer engine's and the shared-memory threads' targets, all ratios within this run. */
function threadTargets(rows: readonly SuiteRow[], baselines: SuiteResult['baselines'], numpyAll256: Timing | null): TargetCheck[] {
  const at = (engine: string, threads: number, batch: number) => rows.find((r) => r.section === 'threads' && r.engine === engine && r.workers === threads && r.batch === batch);
  const fastEngine256 = rows.find((r) => r.section === 'engine' && r.engine === 'fast' && r.network === MID.name && r.batch === 256);
  const f1 = at('fast', 1, 256);
  const f2 = at('fast', 2, 256);
  const i1 = at('int8', 1, 256);
  const i2 = at('int8', 2, 256);
  const i1row = at('int8', 1, 1);
  const np1 = baselines.find((b) => b.network === MID.name && b.batch === 1)?.numpy?.p50Ms;
  const ratio = (a: SuiteRow | undefined, b: { rowsPerSec: number } | undefined | null) => (a && b ? a.rowsPerSec / b.rowsPerSec : undefined);
  const check = (target: string, value: number | undefined, goal: number): TargetCheck => ({ target, reached: value === undefined ? 'not measured' : `${fmt(value, 2)}x`, met: value === undefined ? null : value >= goal });
  return [
    check(`${MID.name} batch 256: int8 on one thread >= 2.2x the fast engine on one thread`, ratio(i1, fastEngine256), 2.2),
    check(`${MID.name} batch 256: float32 on 2 shared-memory threads >= 1.8x one thread`, ratio(f2, f1), 1.8),
    check(`${MID.name} batch 256: int8 on 2 threads >= 1.0x numpy + OpenBLAS on every core`, ratio(i2, numpyAll256), 1.0),
    check(`${MID.name} batch 256: int8 on 2 threads >= 1.8x int8 on one thread`, ratio(i2, i1), 1.8),
    {
      target: `${MID.name} single-row p50: int8 <= numpy`,
      reached: i1row && np1 ? `${fmt(i1row.p50Ms, 3)} ms vs numpy ${fmt(np1, 3)} ms` : 'not measured',
      met: i1row && np1 ? i1row.p50Ms <= np1 : null,
    },
  ];
}

function checkTargets(rows: readonly SuiteRow[], baselines: SuiteResult['baselines'], best: SuiteEngine): TargetCheck[] {
  const engineRows = (batch: number) => rows.filter((r) => r.section === 'engine' && r.network === MID.name && r.batch === batch);
  const mid256 = engineRows(256).reduce<SuiteRow | undefined>((a, r) => (!a || r.rowsPerSec > a.rowsPerSec ? r : a), undefined);
  const mid1 = engineRows(1).reduce<SuiteRow | undefined>((a, r) => (!a || r.p50Ms < a.p50Ms ? r : a), undefined);
  const base1 = baselines.find((b) => b.network === MID.name && b.batch === 1);
  const numpy256 = baselines.find((b) => b.network === MID.name && b.batch === 256)?.numpy;
  const poolAt = (workers: number) => rows.find((r) => r.section === 'pool' && r.engine === best && r.workers === workers && r.batch === 256);
  const pool1 = poolAt(1);
  const pool2 = poolAt(2);
  const trainBest = rows.filter((r) => r.section === 'train').reduce<SuiteRow | undefined>((a, r) => (!a || r.rowsPerSec > a.rowsPerSec ? r : a), undefined);
  const leaks = rows.filter((r) => r.section === 'leak');
  const out: TargetCheck[] = [];
  const check = (target: string, value: number | undefined, goal: number, reached: string): TargetCheck => ({
    target,
    reached,
    met: value === undefined || Number.isNaN(value) ? null : value >= goal,
  });
  out.push(check(`${MID.name} batch 256, one thread, >= 50% of numpy rows/s`, mid256?.vsNumpy, 0.5, mid256 ? `${mid256.engine}: ${fmt(mid256.rowsPerSec, 0)} rows/s = ${fmt(100 * mid256.vsNumpy, 1)}% of numpy` : 'not measured'));
  if (numpy256 && pool2) {
    out.push(check(`${MID.name} batch 256, ${best} on 2 workers, >= 50% of numpy`, pool2.rowsPerSec / numpy256.rowsPerSec, 0.5, `${fmt(pool2.rowsPerSec, 0)} rows/s = ${fmt((100 * pool2.rowsPerSec) / numpy256.rowsPerSec, 1)}%`));
  }
  out.push(check(`${MID.name} batch 256, one thread, >= 60x plain tfjs ops on the JS backend`, mid256?.vsPlainTfjs, 60, mid256 ? `${mid256.engine}: ${fmt(mid256.vsPlainTfjs, 1)}x` : 'not measured'));
  if (pool2 && mid256 && mid256.vsPlainTfjs > 0) {
    // The same ratio for the runtime on every core: the pool's rows/s over the plain ops' rows/s.
    const plain = mid256.rowsPerSec / mid256.vsPlainTfjs;
    out.push(check(`${MID.name} batch 256, ${best} on 2 workers, >= 60x plain tfjs ops`, pool2.rowsPerSec / plain, 60, `${fmt(pool2.rowsPerSec / plain, 1)}x`));
  }
  const np1 = base1?.numpy?.p50Ms;
  out.push({
    target: `${MID.name} single-row p50 within 2x of numpy`,
    reached: mid1 && np1 ? `${mid1.engine}: ${fmt(mid1.p50Ms, 3)} ms vs numpy ${fmt(np1, 3)} ms (${fmt(mid1.p50Ms / np1, 2)}x)` : 'not measured',
    met: mid1 && np1 ? mid1.p50Ms <= 2 * np1 : null,
  });
  out.push(check(`two workers >= 1.8x one worker at batch 256 (${best})`, pool1 && pool2 ? pool2.rowsPerSec / pool1.rowsPerSec : undefined, 1.8, pool1 && pool2 ? `${fmt(pool2.rowsPerSec / pool1.rowsPerSec, 2)}x` : 'not measured'));
  out.push(check('training 784-256-10 at batch 64 >= 10 000 rows/s', trainBest?.rowsPerSec, 10_000, trainBest ? `${trainBest.engine}: ${fmt(trainBest.rowsPerSec, 0)} rows/s` : 'not measured'));
  out.push({
    target: 'no tensor growth over the leak check',
    reached: leaks.map((l) => `${l.engine}: ${l.note}`).join('; ') || 'not run',
    met: leaks.length ? leaks.every((l) => /tensors (\d+)->\1,/.test(l.note)) : null,
  });
  return out;
}

/** The suite's rows as a text table. */
export function formatSuite(result: SuiteResult): string {
  const head = ['section', 'network', 'engine', 'workers', 'batch', 'rows/s', 'GFLOP/s', 'p50 ms', 'p99 ms', 'rss MiB', 'tensors', 'x tfjs ops', 'x ref f64', 'x numpy'];
  const body = result.rows.map((r) => [
    r.section,
    r.network,
    r.engine,
    r.workers ? String(r.workers) : '-',
    String(r.batch),
    fmt(r.rowsPerSec, 0),
    fmt(r.gflops, 2),
    fmt(r.p50Ms, 3),
    fmt(r.p99Ms, 3),
    fmt(r.rssMiB, 0),
    String(r.tensors),
    fmt(r.vsPlainTfjs, 1),
    fmt(r.vsReference, 1),
    fmt(r.vsNumpy, 2),
  ]);
  const baseHead = ['network', 'batch', 'tfjs ops rows/s', 'ref f64 rows/s', 'numpy rows/s', 'numpy p50 ms'];
  const baseBody = result.baselines.map((b) => [b.network, String(b.batch), fmt(b.plainTfjs?.rowsPerSec ?? Number.NaN, 0), fmt(b.reference?.rowsPerSec ?? Number.NaN, 0), fmt(b.numpy?.rowsPerSec ?? Number.NaN, 0), fmt(b.numpy?.p50Ms ?? Number.NaN, 3)]);
  const targets = result.targets.map((t) => `${t.met === null ? '[ ? ]' : t.met ? '[met]' : '[not met]'} ${t.target}: ${t.reached}`);
  return [
    `machine: ${result.machine.cpu} (vector: ${result.machine.vector}), ${result.machine.cores} cores, Node ${result.machine.node}, ${result.machine.numpy}`,
    '',
    table(head, body),
    '',
    'baselines (same run):',
    table(baseHead, baseBody),
    '',
    'targets:',
    ...targets,
    '',
    'notes:',
    ...result.notes.map((n) => `- ${n}`),
  ].join('\n');
}

/** Markdown rows for bench/RESULTS.md, one per configuration, dated. */
export function resultsMarkdownRows(result: SuiteResult, date: Date): string[] {
  const day = date.toISOString().slice(0, 16).replace('T', ' ');
  const m = result.machine;
  return result.rows.map((r) =>
    `| ${day} | ${m.cpu} (${m.vector}), ${m.cores} cores | ${m.node} | ${r.section} | ${r.network} | ${r.engine} | ${r.workers || '-'} | ${r.batch} | ${fmt(r.rowsPerSec, 0)} | ${fmt(r.gflops, 2)} | ${fmt(r.p50Ms, 3)} | ${fmt(r.p99Ms, 3)} | ${fmt(r.rssMiB, 0)} | ${r.tensors} | ${fmt(r.vsPlainTfjs, 1)} | ${fmt(r.vsReference, 1)} | ${fmt(r.vsNumpy, 2)} |`,
  );
}

export const RESULTS_HEADER = [
  '| date (UTC) | machine | node | section | network | engine | workers | batch | rows/s | GFLOP/s | p50 ms | p99 ms | rss MiB | tensors | x tfjs ops | x ref f64 | x numpy |',
  '|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|',
];
