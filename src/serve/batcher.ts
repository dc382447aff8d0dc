/**
 * A micro-batcher for services: many concurrent small requests (one row, or a few) are gathered
 * into one batch, run once, and each request gets its own rows of the answer back.
 *
 * Why: a dense forward pass costs nearly the same for 1 row as for 32 (the weights are streamed
 * through the cache either way), so gathering requests multiplies throughput at the price of at
 * most `maxWaitMs` extra latency. The queue is bounded so an overloaded service says "busy" at
 * once instead of growing its memory and its latency without limit.
 */
import { RuntimeFailure, ShapeError, TendonError } from '../errors.js';

/** Runs `rows` rows of `x` (row-major) and returns rows x outputs, row-major. */
export type BatchRunner = (x: Float32Array, rows: number) => Promise<Float32Array> | Float32Array;

export interface BatcherOptions {
  /** Features per row. */
  readonly width: number;
  /** Largest batch to run at once, in rows. Default 64. */
  readonly maxBatchRows?: number;
  /** Longest a queued request waits for others to join it before its batch starts. Default 2 ms. */
  readonly maxWaitMs?: number;
  /** Rows allowed to wait (not yet running); a submit past this is refused with BusyError. Default 4096. */
  readonly maxQueueRows?: number;
  /** Batches allowed to run at the same time (raise it above a worker pool). Default 1. */
  readonly maxInFlight?: number;
}

/** The queue is full: the caller should back off or shed load. Nothing was queued. */
export class BusyError extends TendonError {
  readonly exitCode = 1;
  constructor(
    readonly queuedRows: number,
    readonly requestRows: number,
    readonly maxQueueRows: number,
  ) {
    super(`busy: ${queuedRows} rows queued, ${requestRows} more would pass the limit of ${maxQueueRows} (maxQueueRows)`);
  }
  override hint = 'retry after a short wait, send fewer rows at once, or raise maxQueueRows';
}

interface Pending {
  readonly data: Float32Array;
  readonly rows: number;
  readonly resolve: (y: Float32Array) => void;
  readonly reject: (cause: unknown) => void;
  /** performance.now() when queued; maxWaitMs counts from here. */
  readonly queuedAt: number;
}

function positiveInteger(name: string, value: number): number {
  if (!Number.isInteger(value) || value < 1) throw new RuntimeFailure(`micro-batcher option ${name} must be a positive integer, got ${value}`);
  return value;
}

/**
 * Gathers concurrent requests into batches for `runBatch`.
 * @example
 * const batcher = new MicroBatcher((x, rows) => session.run(x, rows), { width: 7, maxBatchRows: 32, maxWaitMs: 1 });
 * const scores = await batcher.submit([214, 231, 219, 44, 1.6, 790, 56]); // one row of outputs
 * await batcher.close();
 * @throws BusyError (as a rejection) when the queue is full; ShapeError when a request is not whole rows.
 */
export class MicroBatcher {
  readonly width: number;
  readonly maxBatchRows: number;
  readonly maxWaitMs: number;
  readonly maxQueueRows: number;
  readonly maxInFlight: number;

  private readonly queue: Pending[] = [];
  private queuedRowCount = 0;
  private inFlight = 0;
  private timer: ReturnType<typeof setTimeout> | null = null;
  private closed = false;
  private drainWaiters: (() => void)[] = [];

  constructor(
    private readonly runBatch: BatchRunner,
    options: BatcherOptions,
  ) {
    this.width = positiveInteger('width', options.width);
    this.maxBatchRows = positiveInteger('maxBatchRows', options.maxBatchRows ?? 64);
    this.maxQueueRows = positiveInteger('maxQueueRows', options.maxQueueRows ?? 4096);
    this.maxInFlight = positiveInteger('maxInFlight', options.maxInFlight ?? 1);
    const wait = options.maxWaitMs ?? 2;
    if (!(wait >= 0) || !Number.isFinite(wait)) throw new RuntimeFailure(`micro-batcher option maxWaitMs must be a finite number >= 0, got ${wait}`);
    this.maxWaitMs = wait;
  }

  /** Rows waiting for a batch (not counting those running). */
  get queuedRows(): number {
    return this.queuedRowCount;
  }

  /**
   * Queue one request of one or more whole rows; resolves with its rows of output, in order.
   * A request longer than `maxBatchRows` runs as a batch of its own. With `owned`, the caller
   * gives a Float32Array up (it will not touch it again), so it is queued without a copy.
   */
  submit(row: Float32Array | readonly number[], options: { readonly owned?: boolean } = {}): Promise<Float32Array> {
    if (this.closed) return Promise.reject(new RuntimeFailure('micro-batcher is closed; no new requests are taken'));
    const length = row.length;
    if (length === 0 || length % this.width !== 0) {
      return Promise.reject(new ShapeError('request', ['k', this.width], [length], 'micro-batcher submit (a flat row-major request of whole rows)'));
    }
    const rows = length / this.width;
    if (this.queuedRowCount + rows > this.maxQueueRows) {
      return Promise.reject(new BusyError(this.queuedRowCount, rows, this.maxQueueRows));
    }
    // Copy now, unless given up: the caller may reuse its array as soon as submit returns.
    const data = options.owned && row instanceof Float32Array ? row : Float32Array.from(row);
    return new Promise<Float32Array>((resolve, reject) => {
      this.queue.push({ data, rows, resolve, reject, queuedAt: performance.now() });
      this.queuedRowCount += rows;
      this.schedule();
    });
  }

  /** Run everything already queued (without waiting for maxWaitMs), then refuse new work. */
  close(): Promise<void> {
    this.closed = true;
    this.clearTimer();
    this.pump(true);
    if (this.queue.length === 0 && this.inFlight === 0) return Promise.resolve();
    return new Promise((resolve) => this.drainWaiters.push(resolve));
  }

  private schedule(): void {
    this.pump(this.queuedRowCount >= this.maxBatchRows);
  }

  private clearTimer(): void {
    if (this.timer !== null) {
      clearTimeout(this.timer);
      this.timer = null;
    }
  }

  /**
   * Start batches while a runner slot is free: full batches always, a short batch when `flush`
   * (the oldest request has waited maxWaitMs, or the batcher is closing). Otherwise arm a timer
   * for the oldest request's remaining wait. With no free slot, the finishing batch calls back.
   */
  private pump(flush: boolean): void {
    while (this.queue.length > 0 && this.inFlight < this.maxInFlight) {
      const oldestWaited = performance.now() - this.queue[0]!.queuedAt;
      if (!flush && this.queuedRowCount < this.maxBatchRows && oldestWaited < this.maxWaitMs) break;
      this.startBatch(this.takeBatch());
      flush = this.closed;
    }
    this.clearTimer();
    if (this.queue.length > 0 && this.inFlight < this.maxInFlight) {
      const remaining = Math.max(0, this.maxWaitMs - (performance.now() - this.queue[0]!.queuedAt));
      this.timer = setTimeout(() => {
        this.timer = null;
        this.pump(true);
      }, remaining);
    }
  }

  /** Whole requests from the front of the queue, up to maxBatchRows (at least one request). */
  private takeBatch(): Pending[] {
    const batch: Pending[] = [];
    let rows = 0;
    while (this.queue.length > 0) {
      const next = this.queue[0]!;
      if (batch.length > 0 && rows + next.rows > this.maxBatchRows) break;
      batch.push(next);
      rows += next.rows;
      this.queue.shift();
    }
    this.queuedRowCount -= rows;
    return batch;
  }

  private startBatch(batch: Pending[]): void {
    this.inFlight++;
    let rows = 0;
    for (const p of batch) rows += p.rows;
    // A lone request runs on its own array: the runner only reads it.
    const x = batch.length === 1 ? batch[0]!.data : new Float32Array(rows * this.width);
    if (batch.length > 1) {
      let offset = 0;
      for (const p of batch) {
        x.set(p.data, offset);
        offset += p.data.length;
      }
    }
    // A synchronous throw from the runner becomes a rejection like any other failure.
    new Promise<Float32Array>((resolve) => resolve(this.runBatch(x, rows)))
      .then(
        (y) => this.answer(batch, rows, y),
        (cause: unknown) => {
          for (const p of batch) p.reject(cause);
        },
      )
      .finally(() => {
        this.inFlight--;
        this.pump(this.closed);
        if (this.closed && this.queue.length === 0 && this.inFlight === 0) {
          const waiters = this.drainWaiters;
          this.drainWaiters = [];
          for (const w of waiters) w();
        }
      });
  }

  private answer(batch: Pending[], rows: number, y: Float32Array): void {
    if (!(y instanceof Float32Array) || y.length % rows !== 0) {
      const failure = new RuntimeFailure(`micro-batcher: the batch runner returned ${y?.length} values for ${rows} rows, not a whole number per row`);
      for (const p of batch) p.reject(failure);
      return;
    }
    const outputs = y.length / rows;
    let row = 0;
    for (const p of batch) {
      // slice copies: each caller owns its answer even if the runner reuses its output buffer.
      p.resolve(y.slice(row * outputs, (row + p.rows) * outputs));
      row += p.rows;
    }
  }
}
