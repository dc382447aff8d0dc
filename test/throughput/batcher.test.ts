import { afterEach, describe, expect, it, vi } from 'vitest';
import { BusyError, MicroBatcher } from '../../src/serve/batcher.js';
import { RuntimeFailure, ShapeError } from '../../src/errors.js';

/**
 * A runner whose answer is computed independently of the batcher: output row = [sum of the
 * row, first feature * 10]. It records every batch it saw and can be held open.
 */
function recordingRunner(width: number) {
  const batches: number[][][] = [];
  let gate: Promise<void> | null = null;
  let open: (() => void) | null = null;
  const run = async (x: Float32Array, rows: number): Promise<Float32Array> => {
    const seen: number[][] = [];
    for (let r = 0; r < rows; r++) seen.push(Array.from(x.subarray(r * width, (r + 1) * width)));
    batches.push(seen);
    if (gate) await gate;
    const y = new Float32Array(rows * 2);
    for (let r = 0; r < rows; r++) {
      y[r * 2] = seen[r]!.reduce((a, b) => a + b, 0);
      y[r * 2 + 1] = seen[r]![0]! * 10;
    }
    return y;
  };
  return {
    run,
    batches,
    hold() {
      gate = new Promise((resolve) => (open = resolve));
    },
    release() {
      gate = null;
      open?.();
    },
  };
}

afterEach(() => {
  vi.useRealTimers();
});

describe('MicroBatcher', () => {
  it('answers each request with its own rows, in submission order', async () => {
    const runner = recordingRunner(3);
    const batcher = new MicroBatcher(runner.run, { width: 3, maxBatchRows: 8, maxWaitMs: 1 });
    const requests = [
      [1, 2, 3],
      [4, 5, 6, 7, 8, 9], // a two-row request
      [10, 11, 12],
    ];
    const answers = await Promise.all(requests.map((r) => batcher.submit(r)));
    // Expected values worked by hand from the runner's rule (sum, first * 10).
    expect(Array.from(answers[0]!)).toEqual([6, 10]);
    expect(Array.from(answers[1]!)).toEqual([15, 40, 24, 70]);
    expect(Array.from(answers[2]!)).toEqual([33, 100]);
    // All three were gathered into one batch, rows in submission order.
    expect(runner.batches).toHaveLength(1);
    expect(runner.batches[0]!.map((row) => row[0])).toEqual([1, 4, 7, 10]);
    await batcher.close();
  });

  it('groups up to maxBatchRows and never splits a request across batches', async () => {
    const runner = recordingRunner(1);
    const batcher = new MicroBatcher(runner.run, { width: 1, maxBatchRows: 4, maxWaitMs: 50 });
    const requests = [[1], [2], [3], [4], [5], [6, 7], [8, 9], [10]];
    const answers = await Promise.all(requests.map((r) => batcher.submit(r)));
    // Two-row requests get two rows back: [6, 60, 7, 70] (sum and first * 10 per row).
    expect(answers.map((a) => a[0])).toEqual([1, 2, 3, 4, 5, 6, 8, 10]);
    expect(Array.from(answers[5]!)).toEqual([6, 60, 7, 70]);
    const sizes = runner.batches.map((b) => b.length);
    expect(sizes.every((n) => n <= 4)).toBe(true);
    expect(sizes.reduce((a, b) => a + b, 0)).toBe(10);
    // First batch is full (4 single rows); [5] + [6,7] = 3 rows, [8,9] would make 5 so it waits.
    expect(sizes).toEqual([4, 3, 3]);
    await batcher.close();
  });

  it('starts a full batch at once, without waiting for maxWaitMs', async () => {
    vi.useFakeTimers({ toFake: ['setTimeout', 'clearTimeout', 'performance'] });
    const runner = recordingRunner(1);
    const batcher = new MicroBatcher(runner.run, { width: 1, maxBatchRows: 2, maxWaitMs: 10_000 });
    const a = batcher.submit([1]);
    const b = batcher.submit([2]);
    await Promise.resolve();
    expect(runner.batches).toHaveLength(1);
    expect((await a)[0]).toBe(1);
    expect((await b)[0]).toBe(2);
    await batcher.close();
  });

  it('honours maxWaitMs: a lone request waits that long and no longer', async () => {
    vi.useFakeTimers({ toFake: ['setTimeout', 'clearTimeout', 'performance'] });
    const runner = recordingRunner(1);
    const batcher = new MicroBatcher(runner.run, { width: 1, maxBatchRows: 64, maxWaitMs: 20 });
    const answer = batcher.submit([7]);
    await vi.advanceTimersByTimeAsync(19);
    expect(runner.batches).toHaveLength(0);
    await vi.advanceTimersByTimeAsync(1);
    expect(runner.batches).toHaveLength(1);
    expect(Array.from(await answer)).toEqual([7, 70]);
    await batcher.close();
  });

  it('refuses at once with BusyError when the queue is full, and queues nothing', async () => {
    const runner = recordingRunner(1);
    runner.hold();
    const batcher = new MicroBatcher(runner.run, { width: 1, maxBatchRows: 2, maxWaitMs: 0, maxQueueRows: 3 });
    const first = batcher.submit([1, 2]); // starts running (full batch) and is held
    await new Promise((r) => setTimeout(r, 5));
    const queued = [batcher.submit([3]), batcher.submit([4, 5])]; // 3 rows queued behind it
    await expect(batcher.submit([6])).rejects.toBeInstanceOf(BusyError);
    await expect(batcher.submit([6])).rejects.toThrow(/busy: 3 rows queued, 1 more would pass the limit of 3/);
    expect(batcher.queuedRows).toBe(3);
    runner.release();
    expect(Array.from(await first)).toEqual([1, 10, 2, 20]);
    expect((await queued[0]!)[0]).toBe(3);
    expect((await queued[1]!)[0]).toBe(4);
    await batcher.close();
  });

  it('rejects every request of a failing batch with the cause, and keeps serving', async () => {
    let calls = 0;
    const cause = new Error('kernel fault');
    const batcher = new MicroBatcher(
      (x, rows) => {
        calls++;
        if (calls === 1) throw cause;
        return x.slice(0, rows);
      },
      { width: 1, maxBatchRows: 2, maxWaitMs: 5 },
    );
    const results = await Promise.allSettled([batcher.submit([1]), batcher.submit([2])]);
    expect(results.map((r) => r.status)).toEqual(['rejected', 'rejected']);
    for (const r of results) if (r.status === 'rejected') expect(r.reason).toBe(cause);
    expect((await batcher.submit([3]))[0]).toBe(3);
    await batcher.close();
  });

  it('refuses a request that is not whole rows with a ShapeError', async () => {
    const batcher = new MicroBatcher((x) => x, { width: 3 });
    await expect(batcher.submit([1, 2])).rejects.toBeInstanceOf(ShapeError);
    await batcher.close();
  });

  it('close() runs everything queued without waiting, then refuses new work', async () => {
    const runner = recordingRunner(1);
    const batcher = new MicroBatcher(runner.run, { width: 1, maxBatchRows: 2, maxWaitMs: 60_000 });
    const answers = [batcher.submit([1]), batcher.submit([2]), batcher.submit([3])];
    const started = performance.now();
    await batcher.close();
    expect(performance.now() - started).toBeLessThan(5_000);
    expect((await Promise.all(answers)).map((a) => a[0])).toEqual([1, 2, 3]);
    expect(runner.batches.map((b) => b.length)).toEqual([2, 1]);
    await expect(batcher.submit([4])).rejects.toBeInstanceOf(RuntimeFailure);
  });

  it('gives each caller its own copy even when the runner reuses one output buffer', async () => {
    const shared = new Float32Array(8);
    const batcher = new MicroBatcher(
      (x, rows) => {
        for (let i = 0; i < rows; i++) shared[i] = x[i]! * 2;
        return shared.subarray(0, rows);
      },
      { width: 1, maxBatchRows: 1, maxWaitMs: 0 },
    );
    const [a, b] = await Promise.all([batcher.submit([1]), batcher.submit([5])]);
    expect(a![0]).toBe(2);
    expect(b![0]).toBe(10);
    await batcher.close();
  });
});

describe('MicroBatcher without copies', () => {
  it('runs a lone owned request on the array it was given, and copies a request that is not given up', async () => {
    const seen: Float32Array[] = [];
    const batcher = new MicroBatcher(
      (x, rows) => {
        seen.push(x);
        return new Float32Array(rows).fill(x[0]!);
      },
      { width: 2, maxWaitMs: 0 },
    );
    const owned = Float32Array.of(1, 2);
    expect(Array.from(await batcher.submit(owned, { owned: true }))).toEqual([1]);
    expect(seen[0]).toBe(owned);

    // Not owned: the caller may change its array as soon as submit returns; the batch keeps the old values.
    const lent = Float32Array.of(3, 4);
    const answer = batcher.submit(lent);
    lent[0] = 99;
    expect(Array.from(await answer)).toEqual([3]);
    expect(seen[1]).not.toBe(lent);
    await batcher.close();
  });

  it('gathers owned requests into one batch in order, each answered with its own rows', async () => {
    const runner = recordingRunner(2);
    const batcher = new MicroBatcher(runner.run, { width: 2, maxBatchRows: 8, maxWaitMs: 50 });
    const answers = await Promise.all([
      batcher.submit(Float32Array.of(1, 2), { owned: true }),
      batcher.submit(Float32Array.of(3, 4, 5, 6), { owned: true }),
      batcher.submit(Float32Array.of(7, 8), { owned: true }),
    ]);
    expect(runner.batches).toEqual([
      [
        [1, 2],
        [3, 4],
        [5, 6],
        [7, 8],
      ],
    ]);
    expect(answers.map((a) => Array.from(a))).toEqual([
      [3, 10],
      [7, 30, 11, 50],
      [15, 70],
    ]);
    await batcher.close();
  });
});
