/**
 * A worker-thread pool for inference on every core. Each worker holds its own copy of the model
 * (tfjs state is per thread) and takes a contiguous share of a call's rows; the shares come back
 * into one output in row order. A worker that dies is replaced and its share retried once on the
 * replacement; a second death fails the call with a RuntimeFailure that says which rows.
 */
import { availableParallelism } from 'node:os';
import { Worker } from 'node:worker_threads';
import { RuntimeFailure, ShapeError } from '../errors.js';
import { decodeModel, encodeModel } from '../format/index.js';
import type { ModelDoc } from '../model/index.js';
import type { FromWorker, ToWorker, WorkerEngine, WorkerSetup } from '../engine/worker-protocol.js';

export interface PoolOptions {
  /** Worker threads. Default os.availableParallelism(). */
  readonly size?: number;
  /** Engine each worker uses. Default 'auto'. */
  readonly engine?: WorkerEngine;
  /**
   * The built worker script. Default: worker.js beside this module, which is where the build puts
   * it (dist/worker.js); code run from TypeScript sources (tests) passes dist/worker.js here.
   */
  readonly workerScript?: string | URL;
  /** A call is not split into shares smaller than this, since a share costs a message round trip. Default 32. */
  readonly minShareRows?: number;
  /** Names the model in errors. */
  readonly source?: string;
  /** Test hook: every worker exits when it receives rows, so every call fails. */
  readonly crashEveryRun?: boolean;
}

interface Share {
  readonly call: Call;
  /** First row of the call this share covers. */
  readonly start: number;
  readonly rows: number;
  attempts: number;
}

interface Call {
  readonly x: Float32Array;
  readonly out: Float32Array;
  remaining: number;
  settled: boolean;
  readonly resolve: (y: Float32Array) => void;
  readonly reject: (cause: unknown) => void;
}

interface Slot {
  worker: Worker;
  /** Shares sent and not yet answered, by message id. */
  readonly pending: Map<number, Share>;
  pendingRows: number;
  /** Opened the model; a worker that dies before this is not replaced (no respawn loop). */
  ready: boolean;
  exited: boolean;
}

/** worker.js beside this module in the ESM build; the CJS build has no import.meta.url, so say so. */
function defaultWorkerScript(): URL {
  const here: string | undefined = import.meta.url;
  if (!here) throw new RuntimeFailure('worker pool: this build cannot locate worker.js by itself; pass the workerScript option (the path of dist/worker.js)');
  return new URL('./worker.js', here);
}

/**
 * @example
 * const pool = await WorkerPool.open(doc, { size: 2, engine: 'wasm' });
 * const y = await pool.run(features, rows); // rows x outputs, in row order
 * await pool.close();
 * @throws ModelFileError (as a rejection of open) when a worker cannot open the model.
 */
export class WorkerPool {
  readonly size: number;
  readonly inputs: number;
  readonly outputs: number;
  /** The engine the workers settled on. */
  readonly engine: 'js' | 'wasm' | 'fast' | 'int8';
  /** Workers started to replace ones that died, since the pool opened. */
  replacements = 0;

  private readonly slots: Slot[] = [];
  private nextId = 1;
  private closing = false;
  private readonly minShareRows: number;

  private constructor(
    private readonly setup: WorkerSetup,
    private readonly script: string | URL,
    size: number,
    ready: { engine: 'js' | 'wasm' | 'fast' | 'int8'; inputs: number; outputs: number },
    minShareRows: number,
  ) {
    this.size = size;
    this.inputs = ready.inputs;
    this.outputs = ready.outputs;
    this.engine = ready.engine;
    this.minShareRows = minShareRows;
  }

  /** Start the workers and wait until each has opened the model. */
  static async open(model: ModelDoc | Uint8Array, options: PoolOptions = {}): Promise<WorkerPool> {
    const size = options.size ?? availableParallelism();
    if (!Number.isInteger(size) || size < 1) throw new RuntimeFailure(`worker pool size must be a positive integer, got ${size}`);
    const minShareRows = options.minShareRows ?? 32;
    if (!Number.isInteger(minShareRows) || minShareRows < 1)
      throw new RuntimeFailure(`worker pool minShareRows must be a positive integer, got ${minShareRows}`);
    const source = options.source ?? '(model)';
    // Check the model here, where a ModelFileError keeps its type and its list of problems.
    const bytes = model instanceof Uint8Array ? model : encodeModel(model, source);
    if (model instanceof Uint8Array) decodeModel(bytes, source);
    const setup: WorkerSetup = { model: bytes, source, engine: options.engine ?? 'auto', crashEveryRun: options.crashEveryRun ?? false };
    const script = options.workerScript ?? defaultWorkerScript();

    const started = Array.from({ length: size }, () => startWorker(script, setup));
    const settled = await Promise.allSettled(started.map((s) => s.ready));
    const failure = settled.find((s) => s.status === 'rejected');
    if (failure) {
      await Promise.all(started.map((s) => s.worker.terminate()));
      throw failure.reason;
    }
    const first = settled[0];
    if (first.status !== 'fulfilled') throw new RuntimeFailure('worker pool: no worker started');
    const pool = new WorkerPool(setup, script, size, first.value, minShareRows);
    for (const s of started) pool.adopt(s.worker).ready = true;
    return pool;
  }

  /** Workers alive now (for tests and health checks). */
  get liveWorkers(): number {
    return this.slots.filter((s) => !s.exited).length;
  }

  /**
   * Run rows x inputs features (row-major) across the workers; resolves with rows x outputs.
   * The caller's array is not transferred or changed.
   */
  run(x: Float32Array, rows: number): Promise<Float32Array> {
    if (this.closing) return Promise.reject(new RuntimeFailure('worker pool is closed; no new calls are taken'));
    if (!Number.isInteger(rows) || rows < 0 || x.length !== rows * this.inputs) {
      return Promise.reject(new ShapeError('input', [`${rows} x ${this.inputs} = ${rows * this.inputs} values`], [x.length], 'WorkerPool.run'));
    }
    const out = new Float32Array(rows * this.outputs);
    if (rows === 0) return Promise.resolve(out);
    return new Promise<Float32Array>((resolve, reject) => {
      const shares = Math.max(1, Math.min(this.size, Math.floor(rows / this.minShareRows)));
      const call: Call = { x, out, remaining: shares, settled: false, resolve, reject };
      // Even shares; the first `rows % shares` get one row more.
      const base = Math.floor(rows / shares);
      const extra = rows % shares;
      let start = 0;
      for (let i = 0; i < shares; i++) {
        const n = base + (i < extra ? 1 : 0);
        this.dispatch({ call, start, rows: n, attempts: 0 });
        start += n;
      }
    });
  }

  /**
   * Test hook: the worker at `index` exits when it next receives rows, as a crash mid-call would.
   */
  crashWorkerOnNextRun(index: number): void {
    const slot = this.slots[index];
    if (!slot) throw new RangeError(`crashWorkerOnNextRun: no worker ${index} (pool has ${this.slots.length})`);
    const message: ToWorker = { kind: 'crash-next-run' };
    slot.worker.postMessage(message);
  }

  /** Wait for calls in progress, then end every worker thread. New calls are refused. */
  async close(): Promise<void> {
    this.closing = true;
    while (this.slots.some((s) => s.pending.size > 0)) {
      await new Promise((resolve) => setTimeout(resolve, 5));
    }
    await Promise.all(
      this.slots.map(async (slot) => {
        if (slot.exited) return;
        await slot.worker.terminate();
        slot.exited = true;
      }),
    );
  }

  private adopt(worker: Worker, index = this.slots.length): Slot {
    const slot: Slot = { worker, pending: new Map(), pendingRows: 0, ready: false, exited: false };
    this.slots[index] = slot;
    worker.on('message', (message: FromWorker) => this.onMessage(slot, message));
    // 'error' is followed by 'exit'; the exit handler does the recovery, the error names the cause.
    let cause = '';
    worker.on('error', (error) => {
      cause = error instanceof Error ? error.message : String(error);
    });
    worker.on('exit', (code) => this.onExit(slot, index, cause || `exit code ${code}`));
    return slot;
  }

  /** Send a share to the least-loaded live worker. */
  private dispatch(share: Share): void {
    let best: Slot | null = null;
    for (const slot of this.slots) {
      if (slot.exited) continue;
      if (best === null || slot.pendingRows < best.pendingRows) best = slot;
    }
    if (best === null) {
      this.fail(share.call, new RuntimeFailure('worker pool has no live worker'));
      return;
    }
    share.attempts++;
    const id = this.nextId++;
    // A fresh buffer per send, transferred: the caller's array stays whole for a retry.
    const data = share.call.x.slice(share.start * this.inputs, (share.start + share.rows) * this.inputs).buffer;
    best.pending.set(id, share);
    best.pendingRows += share.rows;
    const message: ToWorker = { kind: 'run', id, rows: share.rows, data };
    best.worker.postMessage(message, [data]);
  }

  private onMessage(slot: Slot, message: FromWorker): void {
    if (message.kind === 'ready') slot.ready = true;
    if (message.kind !== 'done' && message.kind !== 'failed') return;
    const share = slot.pending.get(message.id);
    if (!share) return;
    slot.pending.delete(message.id);
    slot.pendingRows -= share.rows;
    const call = share.call;
    if (call.settled) return;
    if (message.kind === 'failed') {
      this.fail(call, new RuntimeFailure(`worker failed on rows ${share.start}..${share.start + share.rows - 1}: ${message.message}`));
      return;
    }
    const y = new Float32Array(message.data);
    if (y.length !== share.rows * this.outputs) {
      this.fail(call, new RuntimeFailure(`worker returned ${y.length} values for ${share.rows} rows x ${this.outputs} outputs`));
      return;
    }
    call.out.set(y, share.start * this.outputs);
    call.remaining--;
    if (call.remaining === 0) {
      call.settled = true;
      call.resolve(call.out);
    }
  }

  private onExit(slot: Slot, index: number, cause: string): void {
    slot.exited = true;
    const orphans = [...slot.pending.values()];
    slot.pending.clear();
    slot.pendingRows = 0;
    if (this.closing && orphans.length === 0) return;
    if (slot.ready && !this.closing) {
      // Replace the dead worker first so the retry has somewhere to go.
      this.replacements++;
      const replacement = startWorker(this.script, this.setup);
      replacement.ready.catch(() => undefined);
      this.adopt(replacement.worker, index);
    }
    for (const share of orphans) {
      if (share.call.settled) continue;
      if (share.attempts >= 2) {
        this.fail(
          share.call,
          new RuntimeFailure(
            `worker pool: rows ${share.start}..${share.start + share.rows - 1} failed twice, each time because the worker thread died (${cause}); the call is abandoned`,
          ),
        );
      } else {
        this.dispatch(share);
      }
    }
  }

  private fail(call: Call, error: RuntimeFailure): void {
    if (call.settled) return;
    call.settled = true;
    call.reject(error);
  }
}

/** Start one worker; `ready` settles when it has opened the model (or could not). */
function startWorker(
  script: string | URL,
  setup: WorkerSetup,
): { worker: Worker; ready: Promise<{ engine: 'js' | 'wasm' | 'fast' | 'int8'; inputs: number; outputs: number }> } {
  const worker = new Worker(script, { workerData: setup });
  const ready = new Promise<{ engine: 'js' | 'wasm' | 'fast' | 'int8'; inputs: number; outputs: number }>((resolve, reject) => {
    const onMessage = (message: FromWorker): void => {
      if (message.kind === 'ready') {
        worker.off('message', onMessage);
        resolve({ engine: message.engine, inputs: message.inputs, outputs: message.outputs });
      } else if (message.kind === 'open-failed') {
        worker.off('message', onMessage);
        reject(new RuntimeFailure(`worker could not open the model: ${message.message}`));
      }
    };
    worker.on('message', onMessage);
    worker.once('error', (error) => reject(new RuntimeFailure(`worker failed to start: ${error instanceof Error ? error.message : String(error)}`)));
    worker.once('exit', (code) => reject(new RuntimeFailure(`worker exited with code ${code} before it opened the model`)));
  });
  return { worker, ready };
}
