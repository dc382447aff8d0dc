/**
 * The fixed benchmark suite behind `npm run bench`: three network sizes, batch sizes from 1 to
 * 4096, both engines, 1 and 2 workers, the micro-batcher under concurrent callers, a training
 * step, and a leak check; side by side with plain tfjs ops, the float64 reference and numpy.
 *
 * Calls that would take longer than a per-call budget (the plain JS paths on big batches) are
 * skipped with a note, predicted from the throughput measured at the previous batch size.
 */
import { cpus, availableParallelism } from 'node:os';
import {
  availableInt8Ariths,
  bestInt8Arith,
  engineFallbackReason,
  INT8_KERNEL_NAMES,
  Int8Runner,
  kernelDescription,
  liveTensorCount,
  openRunner,
  SharedMemoryRunner,
  useEngine,
  type EngineName,
  type Int8Arith,
  type Runner,
} from '../engine/index.js';
import { decodeModel, encodeModel } from '../format/index.js';
import { wasmSimdAvailable } from '../engine/fast/dense-kernel.js';
import { vectorFeatures } from '../engine/cpu-flags.js';
import type { ModelDoc } from '../model/index.js';
import { MicroBatcher } from '../serve/batcher.js';
import { WorkerPool } from '../serve/pool.js';
import { tune } from '../train/tune.js';
import { numpyAllThreadsRate, numpyKey, plainTfjsForward, referenceRunner, runNumpyBaseline, type NumpyResult } from './baselines.js';
import { fmt, gflops, MEASURED_HEAD, measuredCells, percentile, table, timeCalls, type Timing } from './measure.js';
import { measureEndToEnd } from './end-to-end.js';
import { int8InnerLoopRate } from './kernel-limit.js';
import { denseStackDoc, multiplyAddsPerRow, seededRows } from './models.js';

export interface SuiteOptions {
  /** Fewer batch sizes, shorter timings, a 10 000-call leak check. */
  readonly quick: boolean;
  /** bench/numpy_baseline.py. */
  readonly numpyScript: string;
  /** The built worker (dist/worker.js). */
  readonly workerScript: string | URL;
  /** The built CLI (dist/cli.js), for the end-to-end row; the row is skipped (with a note) without it. */
  readonly cliScript?: string;
  /** bench/numpy_score.py, numpy's side of the end-to-end row. */
  readonly numpyScoreScript?: string;
  /** Progress lines. */
  readonly log: (line: string) => void;
}

export interface SuiteRow {
  readonly section: 'engine' | 'threads' | 'e2e' | 'pool' | 'batcher' | 'train' | 'leak';
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
  /** Leak rows: tfjs tensors after the calls minus before (what the leak target is judged on). */
  readonly tensorGrowth?: number;
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

/** What every section shares: the settings, the rows and notes collected so far, the models. */
interface SuiteRun {
  readonly opts: SuiteOptions;
  readonly quick: boolean;
  readonly batches: readonly number[];
  readonly minMs: number;
  readonly callBudgetMs: number;
  readonly notes: string[];
  readonly rows: SuiteRow[];
  readonly baselines: SuiteResult['baselines'];
  readonly docs: ReadonlyMap<string, ModelDoc>;
  readonly numpy: NumpyResult;
}

type RowFields = Omit<SuiteRow, 'rssMiB' | 'tensors' | 'vsPlainTfjs' | 'vsReference' | 'vsNumpy'>;

/** Run the whole suite; returns every row, the baselines, the target checks and notes. */
export async function runBenchSuite(opts: SuiteOptions): Promise<SuiteResult> {
  const quick = opts.quick;
  const batches = quick ? [1, 256, 4096] : [1, 16, 256, 1024, 4096];
  const minMs = quick ? 300 : 800;
  const notes: string[] = [];
  // numpy first, alone, so its threads do not compete with ours.
  opts.log('numpy + OpenBLAS baseline...');
  const numpy = runNumpyBaseline(
    opts.numpyScript,
    NETWORKS.map((n) => ({ widths: n.widths, batches })),
    minMs,
  );
  if (!numpy.available) notes.push(numpy.note);
  const docs = new Map(NETWORKS.map((n) => [n.name, denseStackDoc(n.widths, 7, 'relu', n.last)]));
  const run: SuiteRun = { opts, quick, batches, minMs, callBudgetMs: quick ? 1500 : 4000, notes, rows: [], baselines: [], docs, numpy };

  await measureBaselines(run);
  const engines = await availableEngines(notes);
  await measureEngines(run, engines);
  const headToHead = await measureThreads(run);
  await measureScoreFile(run);
  const best = fastestEngine(run.rows, engines);
  notes.push(`targets judged on the ${best} engine (fastest at ${MID.name}, batch 256)`);
  await measurePool(run, engines, best);
  await measureBatcher(run, best);
  await measureTraining(run, engines);
  await measureLeaks(run, engines);

  const fallback = engineFallbackReason();
  if (fallback) notes.push(fallback);
  const machine: Machine = {
    cpu: cpus()[0]?.model.trim() ?? 'unknown',
    cores: availableParallelism(),
    node: process.version,
    numpy: numpy.available ? `numpy ${numpy.version} (${numpy.blas})` : 'numpy not available',
    vector: vectorFeatures(),
  };
  const numpyAll256 = numpy.available ? (numpy.allThreads.get(numpyKey(MID.widths, 256)) ?? null) : null;
  const targets = [...checkTargets(run.rows, run.baselines, best), ...threadTargets(run.rows, run.baselines, numpyAll256, headToHead)];
  return { rows: run.rows, baselines: run.baselines, targets, notes, machine };
}

/** Time fn unless one call is predicted to exceed the budget; null (and a note) when skipped. */
async function budgeted(run: SuiteRun, label: string, predictedRowsPerSec: number | null, batch: number, fn: () => unknown): Promise<Timing | null> {
  if (predictedRowsPerSec !== null && (batch / predictedRowsPerSec) * 1000 > run.callBudgetMs) {
    run.notes.push(
      `${label} at batch ${batch} skipped: one call predicted at ${fmt((batch / predictedRowsPerSec) * 1000, 0)} ms, over the ${run.callBudgetMs} ms budget`,
    );
    return null;
  }
  return timeCalls(fn, batch, { minMs: run.minMs, minCalls: 2, warmupCalls: 1, warmupMs: Math.min(200, run.minMs / 2) });
}

/** Add a row, with the memory figures now and its ratios to the baselines of the same network and batch. */
function addRow(run: SuiteRun, r: RowFields): void {
  const b = run.baselines.find((x) => x.network === r.network && x.batch === r.batch);
  run.rows.push({
    ...r,
    rssMiB: rss(),
    tensors: liveTensorCount(),
    vsPlainTfjs: b?.plainTfjs ? r.rowsPerSec / b.plainTfjs.rowsPerSec : Number.NaN,
    vsReference: b?.reference ? r.rowsPerSec / b.reference.rowsPerSec : Number.NaN,
    vsNumpy: b?.numpy ? r.rowsPerSec / b.numpy.rowsPerSec : Number.NaN,
  });
}

function docOf(run: SuiteRun, network: string): ModelDoc {
  const doc = run.docs.get(network);
  if (!doc) throw new Error(`bench suite: no model for ${network}`);
  return doc;
}

/** Plain tfjs ops and the float64 reference, on the JS backend; numpy's timings were taken first. */
async function measureBaselines(run: SuiteRun): Promise<void> {
  await useEngine('js');
  for (const net of NETWORKS) {
    const doc = docOf(run, net.name);
    const plain = plainTfjsForward(doc);
    const ref = referenceRunner(doc);
    let plainRate: number | null = null;
    let refRate: number | null = null;
    for (const batch of run.batches) {
      run.opts.log(`baselines ${net.name} batch ${batch}`);
      const x = seededRows(batch, net.widths[0], batch);
      const p = await budgeted(run, `plain tfjs ops (${net.name})`, plainRate, batch, () => plain.run(x, batch));
      const r = await budgeted(run, `float64 reference (${net.name})`, refRate, batch, () => ref(x, batch));
      plainRate = p?.rowsPerSec ?? plainRate;
      refRate = r?.rowsPerSec ?? refRate;
      const np = run.numpy.available ? (run.numpy.timings.get(numpyKey(net.widths, batch)) ?? null) : null;
      run.baselines.push({ network: net.name, batch, plainTfjs: p, reference: r, numpy: np });
    }
    plain.dispose();
  }
}

/** js always; wasm and fast when this runtime can start them (a note says why not). */
async function availableEngines(notes: string[]): Promise<SuiteEngine[]> {
  const engines: SuiteEngine[] = ['js'];
  try {
    await useEngine('wasm');
    engines.push('wasm');
  } catch (error) {
    notes.push(`wasm engine unavailable: ${error instanceof Error ? error.message.split('\n')[0] : String(error)}`);
  }
  if (wasmSimdAvailable()) engines.push('fast');
  else notes.push('fast engine (own WebAssembly SIMD kernel) unavailable: this runtime has no WebAssembly SIMD');
  return engines;
}

/** Every engine on every network and batch size, in-process. */
async function measureEngines(run: SuiteRun, engines: readonly SuiteEngine[]): Promise<void> {
  for (const engine of engines) {
    for (const net of NETWORKS) {
      const session = await openSuiteRunner(engine, docOf(run, net.name));
      let rate: number | null = null;
      for (const batch of run.batches) {
        run.opts.log(`engine ${engine} ${net.name} batch ${batch}`);
        const x = seededRows(batch, net.widths[0], batch);
        const t = await budgeted(run, `engine ${engine} (${net.name})`, rate, batch, () => session.run(x, batch));
        if (!t) continue;
        rate = t.rowsPerSec;
        const { rowsPerSec, p50Ms, p99Ms } = t;
        addRow(run, {
          section: 'engine',
          network: net.name,
          engine,
          workers: 0,
          batch,
          rowsPerSec,
          gflops: gflops(net.widths, rowsPerSec),
          p50Ms,
          p99Ms,
          note: 'in-process session',
        });
      }
      session.dispose();
    }
  }
}

/**
 * Shared-memory threads on the middle network at batch 256: float32 and int8, one and two threads;
 * int8 on single rows; each other integer arithmetic this runtime has on one thread (engine
 * "int8 <arithmetic>"), so the table shows whether the one chosen is the fastest here.
 */
async function measureThreads(run: SuiteRun): Promise<HeadToHead | null> {
  const int8Arith = bestInt8Arith();
  if (int8Arith === null) {
    run.notes.push('int8 and shared-memory thread rows skipped: this runtime has no WebAssembly SIMD');
    return null;
  }
  const f32Doc = docOf(run, MID.name);
  const i8Doc = decodeModel(encodeModel({ ...f32Doc, storage: 'i8' }), '(benchmark model stored as i8)').doc;
  const cases: {
    name: string;
    threads: number;
    batch: number;
    kernel: string;
    open: (threads: number) => { run(x: Float32Array, n: number): Float32Array; ready(): Promise<void>; dispose(): void };
  }[] = [];
  const int8 = (arith: Int8Arith) => (t: number) => new Int8Runner(i8Doc, { threads: t, arith });
  for (const threads of [1, 2]) {
    const f32 = (t: number) => new SharedMemoryRunner(f32Doc, { arith: 'f32', threads: t });
    cases.push({ name: 'fast', threads, batch: 256, kernel: kernelDescription('fast'), open: f32 });
    cases.push({ name: 'int8', threads, batch: 256, kernel: INT8_KERNEL_NAMES[int8Arith], open: int8(int8Arith) });
  }
  cases.push({ name: 'int8', threads: 1, batch: 1, kernel: INT8_KERNEL_NAMES[int8Arith], open: int8(int8Arith) });
  for (const other of availableInt8Ariths().filter((a) => a !== int8Arith)) {
    cases.push({ name: `int8 ${other}`, threads: 1, batch: 256, kernel: INT8_KERNEL_NAMES[other], open: int8(other) });
  }
  for (const c of cases) {
    run.opts.log(`threads ${c.name} x${c.threads} batch ${c.batch}`);
    const session = c.open(c.threads);
    await session.ready();
    const x = seededRows(c.batch, MID.widths[0], c.batch);
    const t = await budgeted(run, `threads ${c.name} x${c.threads}`, null, c.batch, () => session.run(x, c.batch));
    session.dispose();
    if (!t) continue;
    const kernel = c.kernel;
    addRow(run, {
      section: 'threads',
      network: MID.name,
      engine: c.name,
      workers: c.threads,
      batch: c.batch,
      rowsPerSec: t.rowsPerSec,
      gflops: gflops(MID.widths, t.rowsPerSec),
      p50Ms: t.p50Ms,
      p99Ms: t.p99Ms,
      note: `${kernel}; shared memory, ${c.threads} thread${c.threads > 1 ? 's' : ''}`,
    });
  }
  noteInt8Ceiling(run, int8Arith);
  noteInt8Choice(run, int8Arith);
  return measureHeadToHead(run, i8Doc, int8Arith);
}

/** int8 on 2 threads against numpy on every core, both at batch 256, in alternating rounds. */
interface HeadToHead {
  readonly int8: number[];
  readonly numpy: number[];
}

/**
 * The int8 target measured side by side: rounds of numpy (a fresh process, OpenBLAS on every
 * core) then int8 on 2 threads, each for the suite's time, so a noisy spell of the machine hits
 * both sides alike; the best round of each is compared. null when numpy cannot run.
 */
async function measureHeadToHead(run: SuiteRun, i8Doc: ModelDoc, arith: Int8Arith): Promise<HeadToHead | null> {
  if (!run.numpy.available) return null;
  const rounds = run.quick ? 2 : 3;
  const session = new Int8Runner(i8Doc, { threads: 2, arith });
  await session.ready();
  const x = seededRows(256, MID.widths[0], 256);
  const result: HeadToHead = { int8: [], numpy: [] };
  for (let round = 0; round < rounds; round++) {
    run.opts.log(`head to head, round ${round + 1} of ${rounds}`);
    const numpy = numpyAllThreadsRate(run.opts.numpyScript, MID.widths, 256, run.minMs);
    if (numpy === null) break;
    result.numpy.push(numpy);
    result.int8.push((await timeCalls(() => session.run(x, 256), 256, { minMs: run.minMs, warmupMs: 200 })).rowsPerSec);
  }
  session.dispose();
  if (result.numpy.length === 0) return null;
  const list = (v: number[]) => v.map((r) => fmt(r, 0)).join(' / ');
  run.notes.push(
    `head to head at ${MID.name}, batch 256, ${result.numpy.length} alternating rounds: int8 on 2 threads ${list(result.int8)} rows/s, ` +
      `numpy + OpenBLAS on every core ${list(result.numpy)} rows/s; best of each: ${fmt(Math.max(...result.int8) / Math.max(...result.numpy), 2)}x`,
  );
  return result;
}

const E2E_ROWS = 40_000;

/** `tendon score` of a 40,000 x 784 float32 .npy on the i8-stored middle network against numpy doing the same job, whole processes, 3 rounds. */
async function measureScoreFile(run: SuiteRun): Promise<void> {
  const { cliScript, numpyScoreScript } = run.opts;
  if (!cliScript || !numpyScoreScript) {
    run.notes.push('end-to-end row skipped: no CLI script given');
    return;
  }
  const e = await measureEndToEnd({ cliScript, numpyScript: numpyScoreScript, widths: MID.widths, rows: E2E_ROWS, rounds: 3, log: run.opts.log });
  if (e.note) run.notes.push(e.note);
  const best = Math.min(...e.tendonSeconds);
  const seconds = (list: number[]) => list.map((v) => fmt(v, 2)).join(' / ');
  run.notes.push(
    `end to end (whole processes, best of each): tendon score ${seconds(e.tendonSeconds)} s, numpy ${seconds(e.numpySeconds)} s ` +
      `(one OpenBLAS thread, then all, per round; best on ${e.numpyBestThreads === '1' ? 'one thread' : 'all threads'}); ` +
      `top class agrees on ${fmt(100 * e.topClassAgreement, 2)}% of rows, largest output difference ${fmt(e.maxAbsDiff, 4)} (int8 against float32 weights); tendon said: ${e.tendonLine}`,
  );
  run.rows.push({
    section: 'e2e',
    network: `${MID.name} (i8 file)`,
    engine: 'auto',
    workers: availableParallelism(),
    batch: 256,
    rowsPerSec: E2E_ROWS / best,
    gflops: gflops(MID.widths, E2E_ROWS / best),
    p50Ms: Number.NaN,
    p99Ms: Number.NaN,
    rssMiB: rss(),
    tensors: liveTensorCount(),
    vsPlainTfjs: Number.NaN,
    vsReference: Number.NaN,
    vsNumpy: e.vsNumpy,
    note: `tendon score of a ${E2E_ROWS} x ${MID.widths[0]} float32 .npy vs numpy np.load + forward in batches of 256 + np.save; whole processes`,
  });
}

/** Whether the integer arithmetic the engine chose (bestInt8Arith) is the fastest of those measured on one thread here. */
function noteInt8Choice(run: SuiteRun, chosen: Int8Arith): void {
  if (!availableInt8Ariths().includes('relaxed-add')) {
    run.notes.push(
      `int8 dot-add form (i32x4.relaxed_dot_i8x16_i7x16_add_s) not run: V8 ${process.versions.v8} refuses it or gives wrong sums (known-answer probe); ` +
        'on x64 with AVX-VNNI, V8 13.6 (Node 24) runs it as one instruction',
    );
  }
  const measured = run.rows.filter((r) => r.section === 'threads' && r.engine.startsWith('int8') && r.workers === 1 && r.batch === 256);
  if (measured.length < 2) return;
  const name = (r: SuiteRow) => (r.engine === 'int8' ? chosen : r.engine.slice('int8 '.length));
  const fastest = measured.reduce((a, b) => (b.rowsPerSec > a.rowsPerSec ? b : a));
  const list = measured.map((r) => `${name(r)} ${fmt(r.rowsPerSec, 0)} rows/s`).join(', ');
  const verdict =
    fastest.engine === 'int8'
      ? 'the chosen one is the fastest here'
      : `${name(fastest)} would be ${fmt(fastest.rowsPerSec / measured[0].rowsPerSec, 2)}x faster here`;
  run.notes.push(`int8 arithmetic chosen: ${chosen}; one thread, batch 256: ${list}; ${verdict}`);
}

/** How close the int8 model on one thread runs to its kernel's inner loop alone (kernel-limit.ts). */
function noteInt8Ceiling(run: SuiteRun, arith: Int8Arith): void {
  const row = run.rows.find((r) => r.section === 'threads' && r.engine === 'int8' && r.workers === 1 && r.batch === 256);
  if (!row) return;
  run.opts.log('int8 inner loop on L1-resident data');
  const ceiling = int8InnerLoopRate(arith, run.minMs);
  const model = row.rowsPerSec * multiplyAddsPerRow(MID.widths);
  run.notes.push(
    `int8 kernel (${arith}): its inner loop alone on L1-resident data does ${fmt(ceiling / 1e9, 1)} G multiply-adds/s; ` +
      `${MID.name} at batch 256 on one thread does ${fmt(model / 1e9, 1)} G/s, ${fmt((100 * model) / ceiling, 0)}% of it`,
  );
}

/** The engine the targets are judged on: the fastest at the middle network, batch 256. */
function fastestEngine(rows: readonly SuiteRow[], engines: readonly SuiteEngine[]): SuiteEngine {
  const at256 = (e: SuiteEngine) => rows.find((r) => r.section === 'engine' && r.engine === e && r.network === MID.name && r.batch === 256)?.rowsPerSec ?? 0;
  return engines.reduce((a, b) => (at256(b) > at256(a) ? b : a));
}

/** The worker pool on the middle network, 1 and 2 workers. */
async function measurePool(run: SuiteRun, engines: readonly SuiteEngine[], best: SuiteEngine): Promise<void> {
  const poolBatches = run.quick ? [256] : [256, 4096];
  const poolEngines: readonly SuiteEngine[] = run.quick ? [best] : engines;
  for (const engine of poolEngines) {
    for (const workers of [1, 2]) {
      run.opts.log(`pool ${engine} x${workers}`);
      const pool = await WorkerPool.open(docOf(run, MID.name), { size: workers, engine, workerScript: run.opts.workerScript, minShareRows: 16 });
      let rate: number | null = null;
      for (const batch of poolBatches) {
        const x = seededRows(batch, MID.widths[0], batch);
        const t = await budgeted(run, `pool ${engine} x${workers}`, rate, batch, () => pool.run(x, batch));
        if (!t) continue;
        rate = t.rowsPerSec;
        const { rowsPerSec, p50Ms, p99Ms } = t;
        addRow(run, {
          section: 'pool',
          network: MID.name,
          engine,
          workers,
          batch,
          rowsPerSec,
          gflops: gflops(MID.widths, rowsPerSec),
          p50Ms,
          p99Ms,
          note: 'worker threads',
        });
      }
      await pool.close();
    }
  }
}

/** The micro-batcher: concurrent single-row callers, in-process session on the best engine. */
async function measureBatcher(run: SuiteRun, best: SuiteEngine): Promise<void> {
  for (const net of [NETWORKS[0], MID]) {
    const session = await openSuiteRunner(best, docOf(run, net.name));
    const callers = 64;
    run.opts.log(`micro-batcher ${net.name}, ${callers} callers`);
    const batcher = new MicroBatcher((x, n) => session.run(x, n), { width: net.widths[0], maxBatchRows: 64, maxWaitMs: 1, maxQueueRows: 4096 });
    const one = seededRows(1, net.widths[0], 3);
    const latencies: number[] = [];
    const until = performance.now() + run.minMs * 2;
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
    const note = `${callers} concurrent single-row callers, max batch 64, max wait 1 ms`;
    addRow(run, {
      section: 'batcher',
      network: net.name,
      engine: best,
      workers: 0,
      batch: 1,
      rowsPerSec: rps,
      gflops: gflops(net.widths, rps),
      p50Ms: percentile(latencies, 0.5),
      p99Ms: percentile(latencies, 0.99),
      note,
    });
  }
}

const TRAIN_WIDTHS = [784, 256, 10];
const TRAIN_NETWORK = 'train 784-256-10';

/** Training 784-256-10 at batch 64: one epoch on each tfjs engine, then tune's fast path with SGD and Adam. */
async function measureTraining(run: SuiteRun, engines: readonly SuiteEngine[]): Promise<void> {
  // A training step is about 3x the forward multiply-adds (forward, input gradient, weight gradient).
  const trainRow = (engine: string, rps: number, note: string) =>
    addRow(run, {
      section: 'train',
      network: TRAIN_NETWORK,
      engine,
      workers: 0,
      batch: 64,
      rowsPerSec: rps,
      gflops: 3 * gflops(TRAIN_WIDTHS, rps),
      p50Ms: Number.NaN,
      p99Ms: Number.NaN,
      note,
    });
  for (const engine of engines.filter((e): e is EngineName => e !== 'fast')) {
    await useEngine(engine);
    const n = engine === 'js' ? (run.quick ? 256 : 1024) : run.quick ? 1024 : 4096;
    run.opts.log(`training ${engine} ${n} rows`);
    const doc: ModelDoc = denseStackDoc(TRAIN_WIDTHS, 3, 'relu', 'softmax');
    const x = seededRows(n, 784, 4);
    const y = Int32Array.from({ length: n }, (_, i) => i % 10);
    const result = await tune(doc, { x, rows: n, y }, { epochs: 1, batch: 64, lr: 0.01, optimizer: 'sgd', seed: 1, path: 'engine' });
    trainRow(engine, result.history[0]?.rowsPerSecond ?? Number.NaN, `one epoch of ${n} rows, sgd, steps only`);
  }
  if (!engines.includes('fast')) return;
  // The same epoch through tune on the fast path (SimdTrainer), plain SGD and Adam.
  const n = run.quick ? 2048 : 8192;
  const x = seededRows(n, 784, 4);
  const y = Int32Array.from({ length: n }, (_, i) => i % 10);
  for (const optimizer of ['sgd', 'adam'] as const) {
    run.opts.log(`training fast ${n} rows, ${optimizer}`);
    const doc = denseStackDoc(TRAIN_WIDTHS, 3, 'relu', 'softmax');
    const result = await tune(doc, { x, rows: n, y }, { epochs: 2, batch: 64, lr: 0.01, optimizer, seed: 1, path: 'fast' });
    // The second epoch: the kernel is compiled and warm.
    trainRow('fast', result.history[1]?.rowsPerSecond ?? Number.NaN, `second epoch of ${n} rows through tune, ${optimizer}, steps only`);
  }
}

/** Leak check: many small calls must leave the tfjs tensor count unchanged and rss flat (tfjs engines only). */
async function measureLeaks(run: SuiteRun, engines: readonly SuiteEngine[]): Promise<void> {
  for (const engine of engines.filter((e): e is EngineName => e !== 'fast')) {
    await useEngine(engine);
    const calls = run.quick ? 10_000 : 100_000;
    const net = NETWORKS[0];
    const session = openRunner(docOf(run, net.name), engine);
    const x = seededRows(1, net.widths[0], 8);
    for (let i = 0; i < 1000; i++) session.run(x, 1);
    const tensorsBefore = liveTensorCount();
    const rssBefore = rss();
    run.opts.log(`leak check: ${calls} calls`);
    const t0 = performance.now();
    for (let i = 0; i < calls; i++) session.run(x, 1);
    const seconds = (performance.now() - t0) / 1000;
    const tensorsAfter = liveTensorCount();
    const rssAfter = rss();
    session.dispose();
    run.notes.push(
      `leak check (${engine}, ${net.name}, ${calls} calls of run): tensors ${tensorsBefore} -> ${tensorsAfter}, rss ${fmt(rssBefore, 1)} -> ${fmt(rssAfter, 1)} MiB`,
    );
    const note = `tensors ${tensorsBefore}->${tensorsAfter}, rss ${fmt(rssBefore, 0)}->${fmt(rssAfter, 0)} MiB`;
    const rps = calls / seconds;
    addRow(run, {
      section: 'leak',
      network: net.name,
      engine,
      workers: 0,
      batch: 1,
      rowsPerSec: rps,
      gflops: gflops(net.widths, rps),
      p50Ms: Number.NaN,
      p99Ms: Number.NaN,
      tensorGrowth: tensorsAfter - tensorsBefore,
      note,
    });
  }
}

/** The integer engine's and the shared-memory threads' targets, all ratios within this run. */
function threadTargets(
  rows: readonly SuiteRow[],
  baselines: SuiteResult['baselines'],
  numpyAll256: Timing | null,
  headToHead: HeadToHead | null,
): TargetCheck[] {
  const at = (engine: string, threads: number, batch: number) =>
    rows.find((r) => r.section === 'threads' && r.engine === engine && r.workers === threads && r.batch === batch);
  const fastEngine256 = rows.find((r) => r.section === 'engine' && r.engine === 'fast' && r.network === MID.name && r.batch === 256);
  const f1 = at('fast', 1, 256);
  const f2 = at('fast', 2, 256);
  const i1 = at('int8', 1, 256);
  const i2 = at('int8', 2, 256);
  const i1row = at('int8', 1, 1);
  const e2e = rows.find((r) => r.section === 'e2e');
  const np1 = baselines.find((b) => b.network === MID.name && b.batch === 1)?.numpy?.p50Ms;
  const ratio = (a: SuiteRow | undefined, b: { rowsPerSec: number } | undefined | null) => (a && b ? a.rowsPerSec / b.rowsPerSec : undefined);
  const check = (target: string, value: number | undefined, goal: number): TargetCheck => ({
    target,
    reached: value === undefined ? 'not measured' : `${fmt(value, 2)}x`,
    met: value === undefined ? null : value >= goal,
  });
  return [
    check(`${MID.name} batch 256: int8 on one thread >= 2.2x the fast engine on one thread`, ratio(i1, fastEngine256), 2.2),
    check(`${MID.name} batch 256: float32 on 2 shared-memory threads >= 1.8x one thread`, ratio(f2, f1), 1.8),
    headToHead
      ? check(
          `${MID.name} batch 256: int8 on 2 threads >= 1.0x numpy + OpenBLAS on every core (best of ${headToHead.numpy.length} alternating rounds each)`,
          Math.max(...headToHead.int8) / Math.max(...headToHead.numpy),
          1.0,
        )
      : check(`${MID.name} batch 256: int8 on 2 threads >= 1.0x numpy + OpenBLAS on every core`, ratio(i2, numpyAll256), 1.0),
    check(`${MID.name} batch 256: int8 on 2 threads >= 1.8x int8 on one thread`, ratio(i2, i1), 1.8),
    check(
      `end to end: tendon score of a ${E2E_ROWS} x ${MID.widths[0]} .npy on the i8 ${MID.name} >= numpy doing the same job`,
      e2e && !Number.isNaN(e2e.vsNumpy) ? e2e.vsNumpy : undefined,
      1.0,
    ),
    {
      target: `${MID.name} single-row p50: int8 <= numpy`,
      reached: i1row && np1 ? `${fmt(i1row.p50Ms, 3)} ms vs numpy ${fmt(np1, 3)} ms` : 'not measured',
      met: i1row && np1 ? i1row.p50Ms <= np1 : null,
    },
  ];
}

/** The figures the targets are judged on, picked out of the rows once. */
export interface TargetFigures {
  readonly best: string;
  /** The fastest engine row at the middle network, batch 256. */
  readonly mid256: SuiteRow | undefined;
  /** The engine row with the lowest single-row p50 at the middle network. */
  readonly mid1: SuiteRow | undefined;
  readonly numpy1: Timing | null | undefined;
  readonly numpy256: Timing | null | undefined;
  readonly pool1: SuiteRow | undefined;
  readonly pool2: SuiteRow | undefined;
  readonly trainBest: SuiteRow | undefined;
  readonly leaks: readonly SuiteRow[];
}

/**
 * One target: a number taken from the figures and the bound it must meet. `value` is undefined
 * (or NaN) when what it needs was not measured; the target is then reported as not judged.
 */
interface TargetSpec {
  readonly name: (f: TargetFigures) => string;
  readonly value: (f: TargetFigures) => number | undefined;
  readonly atLeast?: number;
  readonly atMost?: number;
  readonly reached: (f: TargetFigures, value: number) => string;
  /** What `reached` says when the value is missing; default 'not measured'. */
  readonly unmeasured?: string;
  /** Left out of the list (not just unjudged) when false. */
  readonly applies?: (f: TargetFigures) => boolean;
}

const plainRate = (r: SuiteRow) => r.rowsPerSec / r.vsPlainTfjs;

/** The speed and hygiene targets, as a table. */
const TARGETS: readonly TargetSpec[] = [
  {
    name: () => `${MID.name} batch 256, one thread, >= 50% of numpy rows/s`,
    value: (f) => f.mid256?.vsNumpy,
    atLeast: 0.5,
    reached: (f, v) => `${f.mid256?.engine}: ${fmt(f.mid256?.rowsPerSec ?? Number.NaN, 0)} rows/s = ${fmt(100 * v, 1)}% of numpy`,
  },
  {
    name: (f) => `${MID.name} batch 256, ${f.best} on 2 workers, >= 50% of numpy`,
    value: (f) => (f.pool2 && f.numpy256 ? f.pool2.rowsPerSec / f.numpy256.rowsPerSec : undefined),
    atLeast: 0.5,
    reached: (f, v) => `${fmt(f.pool2?.rowsPerSec ?? Number.NaN, 0)} rows/s = ${fmt(100 * v, 1)}%`,
    applies: (f) => Boolean(f.numpy256 && f.pool2),
  },
  {
    name: () => `${MID.name} batch 256, one thread, >= 60x plain tfjs ops on the JS backend`,
    value: (f) => f.mid256?.vsPlainTfjs,
    atLeast: 60,
    reached: (f, v) => `${f.mid256?.engine}: ${fmt(v, 1)}x`,
  },
  {
    // The same ratio for the runtime on every core: the pool's rows/s over the plain ops' rows/s.
    name: (f) => `${MID.name} batch 256, ${f.best} on 2 workers, >= 60x plain tfjs ops`,
    value: (f) => (f.pool2 && f.mid256 ? f.pool2.rowsPerSec / plainRate(f.mid256) : undefined),
    atLeast: 60,
    reached: (_f, v) => `${fmt(v, 1)}x`,
    applies: (f) => Boolean(f.pool2 && f.mid256 && f.mid256.vsPlainTfjs > 0),
  },
  {
    name: () => `${MID.name} single-row p50 within 2x of numpy`,
    value: (f) => (f.mid1 && f.numpy1 ? f.mid1.p50Ms / f.numpy1.p50Ms : undefined),
    atMost: 2,
    reached: (f, v) => `${f.mid1?.engine}: ${fmt(f.mid1?.p50Ms ?? Number.NaN, 3)} ms vs numpy ${fmt(f.numpy1?.p50Ms ?? Number.NaN, 3)} ms (${fmt(v, 2)}x)`,
  },
  {
    name: (f) => `two workers >= 1.8x one worker at batch 256 (${f.best})`,
    value: (f) => (f.pool1 && f.pool2 ? f.pool2.rowsPerSec / f.pool1.rowsPerSec : undefined),
    atLeast: 1.8,
    reached: (_f, v) => `${fmt(v, 2)}x`,
  },
  {
    name: () => 'training 784-256-10 at batch 64 >= 10 000 rows/s',
    value: (f) => f.trainBest?.rowsPerSec,
    atLeast: 10_000,
    reached: (f, v) => `${f.trainBest?.engine}: ${fmt(v, 0)} rows/s`,
  },
  {
    name: () => 'no tensor growth over the leak check',
    value: (f) => (f.leaks.length ? Math.max(...f.leaks.map((l) => l.tensorGrowth ?? Number.NaN)) : undefined),
    atMost: 0,
    reached: (f) => f.leaks.map((l) => `${l.engine}: ${l.note}`).join('; '),
    unmeasured: 'not run',
  },
];

function bestBy(rows: readonly SuiteRow[], better: (a: SuiteRow, b: SuiteRow) => boolean): SuiteRow | undefined {
  return rows.reduce<SuiteRow | undefined>((a, r) => (!a || better(r, a) ? r : a), undefined);
}

function targetFigures(rows: readonly SuiteRow[], baselines: SuiteResult['baselines'], best: string): TargetFigures {
  const engineRows = (batch: number) => rows.filter((r) => r.section === 'engine' && r.network === MID.name && r.batch === batch);
  const poolAt = (workers: number) => rows.find((r) => r.section === 'pool' && r.engine === best && r.workers === workers && r.batch === 256);
  const baselineAt = (batch: number) => baselines.find((b) => b.network === MID.name && b.batch === batch);
  return {
    best,
    mid256: bestBy(engineRows(256), (r, a) => r.rowsPerSec > a.rowsPerSec),
    mid1: bestBy(engineRows(1), (r, a) => r.p50Ms < a.p50Ms),
    numpy1: baselineAt(1)?.numpy,
    numpy256: baselineAt(256)?.numpy,
    pool1: poolAt(1),
    pool2: poolAt(2),
    trainBest: bestBy(
      rows.filter((r) => r.section === 'train'),
      (r, a) => r.rowsPerSec > a.rowsPerSec,
    ),
    leaks: rows.filter((r) => r.section === 'leak'),
  };
}

/**
 * Judge the targets on the measured numbers.
 * @example checkTargets(result.rows, result.baselines, 'fast').filter((t) => t.met === false)
 */
export function checkTargets(rows: readonly SuiteRow[], baselines: SuiteResult['baselines'], best: string): TargetCheck[] {
  const f = targetFigures(rows, baselines, best);
  return TARGETS.filter((t) => t.applies?.(f) ?? true).map((t) => {
    const value = t.value(f);
    const measured = value !== undefined && !Number.isNaN(value);
    const met = !measured ? null : (t.atLeast === undefined || value >= t.atLeast) && (t.atMost === undefined || value <= t.atMost);
    return { target: t.name(f), reached: measured ? t.reached(f, value) : (t.unmeasured ?? 'not measured'), met };
  });
}

/** The suite's rows as a text table. */
export function formatSuite(result: SuiteResult): string {
  const head = ['section', 'network', 'engine', 'workers', ...MEASURED_HEAD, 'x tfjs ops', 'x ref f64', 'x numpy'];
  const body = result.rows.map((r) => [
    r.section,
    r.network,
    r.engine,
    r.workers ? String(r.workers) : '-',
    ...measuredCells(r),
    fmt(r.vsPlainTfjs, 1),
    fmt(r.vsReference, 1),
    fmt(r.vsNumpy, 2),
  ]);
  const baseHead = ['network', 'batch', 'tfjs ops rows/s', 'ref f64 rows/s', 'numpy rows/s', 'numpy p50 ms'];
  const baseBody = result.baselines.map((b) => [
    b.network,
    String(b.batch),
    fmt(b.plainTfjs?.rowsPerSec ?? Number.NaN, 0),
    fmt(b.reference?.rowsPerSec ?? Number.NaN, 0),
    fmt(b.numpy?.rowsPerSec ?? Number.NaN, 0),
    fmt(b.numpy?.p50Ms ?? Number.NaN, 3),
  ]);
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
  return result.rows.map(
    (r) =>
      `| ${day} | ${m.cpu} (${m.vector}), ${m.cores} cores | ${m.node} | ${r.section} | ${r.network} | ${r.engine} | ${r.workers || '-'} | ${r.batch} | ${fmt(r.rowsPerSec, 0)} | ${fmt(r.gflops, 2)} | ${fmt(r.p50Ms, 3)} | ${fmt(r.p99Ms, 3)} | ${fmt(r.rssMiB, 0)} | ${r.tensors} | ${fmt(r.vsPlainTfjs, 1)} | ${fmt(r.vsReference, 1)} | ${fmt(r.vsNumpy, 2)} |`,
  );
}

export const RESULTS_HEADER = [
  '| date (UTC) | machine | node | section | network | engine | workers | batch | rows/s | GFLOP/s | p50 ms | p99 ms | rss MiB | tensors | x tfjs ops | x ref f64 | x numpy |',
  '|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|---|',
];
