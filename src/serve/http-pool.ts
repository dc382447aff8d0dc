/**
 * Batches on every core: one worker pool per served model. The slot prepares a pool for a new
 * model before swapping it in (a pool that cannot start refuses the swap, so the old model keeps
 * serving) and retires the old model's pool only after the last batch leased on it has ended.
 */
import { availableParallelism } from 'node:os';
import { RuntimeFailure, TendonError } from '../errors.js';
import type { TendonModel } from '../tendon.js';
import { HttpProblem } from './http-problem.js';
import type { ModelBatchRunner } from './http-score.js';
import { WorkerPool } from './pool.js';

/** Worker threads for scoring: 1 runs batches in the main thread; 0 or 'auto' means one per core. */
export type WorkerCount = number | 'auto';

/**
 * The number of worker threads `workers` asks for.
 * @example workerCount('auto') // os.availableParallelism(), e.g. 8
 * @throws RuntimeFailure when it is not 'auto' or a whole number >= 0.
 */
export function workerCount(workers: WorkerCount | undefined): number {
  if (workers === undefined) return 1;
  if (workers === 'auto' || workers === 0) return availableParallelism();
  if (!Number.isInteger(workers) || workers < 0) throw new RuntimeFailure(`the workers option must be 'auto' or a whole number >= 0, got ${String(workers)}`);
  return workers;
}

export interface PooledRunnerOptions {
  /** Worker threads per pool (> 1). */
  readonly size: number;
  /** The built worker script (dist/worker.js); default: the one beside the pool module. */
  readonly workerScript?: string | URL;
  /**
   * A batch is split across workers only into shares of at least this many rows. The handler
   * passes its largest batch, so each batch goes whole to one worker (one message each way) while
   * the batcher keeps every worker busy with batches of their own; a longer request is still split.
   */
  readonly minShareRows?: number;
  /** One line when a batch fails in the pool. */
  readonly log: (line: string) => void;
}

/**
 * Worker pools keyed by the model they hold. Each pool's workers run the model on the same
 * engine the main thread chose, so an answer is the one the main thread would give.
 * @example
 * const pools = new PooledRunner({ size: 2, log: console.error });
 * await pools.prepare(model);
 * const y = await pools.run(model, x, rows);
 * pools.retire(model); await pools.close();
 */
export class PooledRunner {
  private readonly pools = new Map<TendonModel, WorkerPool>();
  /** Pools retired and still ending their threads. */
  private readonly retiring = new Map<WorkerPool, Promise<void>>();

  constructor(private readonly options: PooledRunnerOptions) {}

  /** Start a pool holding `model` and wait until every worker has opened it. */
  async prepare(model: TendonModel): Promise<void> {
    if (this.pools.has(model)) return;
    const pool = await WorkerPool.open(model.doc, {
      size: this.options.size,
      engine: model.engine,
      workerScript: this.options.workerScript,
      source: model.source ?? '(document)',
      minShareRows: this.options.minShareRows,
    });
    this.pools.set(model, pool);
  }

  /**
   * Run a batch on the pool holding `model`. A failure (a worker died on it twice) fails this
   * batch only, as a 500 with one line; the pool has already replaced its dead workers.
   */
  readonly run: ModelBatchRunner = async (model, x, rows) => {
    const pool = this.pools.get(model);
    if (!pool) throw new RuntimeFailure(`no worker pool holds the model ${model.source ?? '(document)'}; it was retired or never prepared`);
    try {
      return await pool.run(x, rows);
    } catch (error) {
      const message = (error instanceof Error ? error.message : String(error)).replace(/\s*\n\s*/g, ' ');
      this.options.log(`tendon serve: a batch of ${rows} rows failed in the worker pool: ${message}`);
      if (error instanceof TendonError) throw new HttpProblem(500, `the batch holding this request was not scored: ${message}`);
      throw error;
    }
  };

  /** Close the pool holding `model` (its batches have ended); the threads stop in the background. */
  retire(model: TendonModel): void {
    const pool = this.pools.get(model);
    if (!pool) return;
    this.pools.delete(model);
    this.retiring.set(
      pool,
      pool
        .close()
        .catch((error: unknown) => this.options.log(`tendon serve: closing a worker pool failed: ${error instanceof Error ? error.message : String(error)}`))
        .finally(() => this.retiring.delete(pool)),
    );
  }

  /** Worker threads alive across every pool, including pools still closing. */
  get liveWorkers(): number {
    let live = 0;
    for (const pool of [...this.pools.values(), ...this.retiring.keys()]) live += pool.liveWorkers;
    return live;
  }

  /** Close every pool and wait until all their threads have ended. */
  async close(): Promise<void> {
    for (const model of [...this.pools.keys()]) this.retire(model);
    await Promise.all([...this.retiring.values()]);
  }
}
