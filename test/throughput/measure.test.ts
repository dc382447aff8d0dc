import { describe, expect, it } from 'vitest';
import * as tf from '@tensorflow/tfjs-core';
import { benchModel, gflops, percentile, timeCalls } from '../../src/bench/measure.js';
import { denseStackDoc, multiplyAddsPerRow, seededRows } from '../../src/bench/models.js';
import { plainTfjsForward } from '../../src/bench/baselines.js';
import { useEngine } from '../../src/engine/index.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';

describe('bench measuring', () => {
  it('percentile is nearest-rank (the worked example 15, 20, 35, 40, 50; from memory)', () => {
    const v = [15, 20, 35, 40, 50];
    expect(percentile(v, 0.05)).toBe(15);
    expect(percentile(v, 0.3)).toBe(20);
    expect(percentile(v, 0.4)).toBe(20);
    expect(percentile(v, 0.5)).toBe(35);
    expect(percentile(v, 1)).toBe(50);
  });

  it('counts 2 FLOPs per multiply-add of x·W (common practice): 784-512-256-10 has 535 040 per row', () => {
    // 784*512 + 512*256 + 256*10, worked by hand.
    expect(multiplyAddsPerRow([784, 512, 256, 10])).toBe(535_040);
    expect(gflops([784, 512, 256, 10], 1000)).toBeCloseTo(1.07008, 10);
  });

  it('timeCalls makes at least minCalls calls after the warm-up and reports rows/s from them', async () => {
    let calls = 0;
    const t = await timeCalls(() => calls++, 10, { warmupCalls: 2, minCalls: 5, minMs: 0 });
    expect(t.calls).toBe(5);
    expect(calls).toBe(7);
    expect(t.rowsPerSec).toBeCloseTo((10 * 5 * 1000) / t.totalMs, 6);
    expect(t.p50Ms).toBeLessThanOrEqual(t.p99Ms);
  });

  it('timeCalls keeps warming up until warmupMs has passed, then times only the calls after it', async () => {
    const stamps: number[] = [];
    const started = performance.now();
    const t = await timeCalls(() => stamps.push(performance.now()), 1, { warmupCalls: 1, warmupMs: 30, minCalls: 3, minMs: 0 });
    expect(t.calls).toBe(3);
    const warm = stamps.slice(0, -3);
    expect(warm.length).toBeGreaterThan(1);
    // The timed calls start only once 30 ms of warm-up have passed.
    expect(stamps.at(-3)! - started).toBeGreaterThanOrEqual(30);
  });

  it('the plain tfjs-ops baseline computes the same network as the float64 reference (float32 tolerance, common practice)', async () => {
    await useEngine('js');
    const doc = denseStackDoc([12, 16, 4], 2, 'relu', 'softmax');
    const plain = plainTfjsForward(doc);
    const x = seededRows(9, 12, 3);
    const y = plain.run(x, 9);
    plain.dispose();
    const ref = referenceForward(doc, toMat64(x, 9, 12)).y.data;
    expect(y.length).toBe(ref.length);
    for (let i = 0; i < ref.length; i++) expect(Math.abs(y[i]! - ref[i]!)).toBeLessThan(1e-5);
  });

  it('benchModel gives one row per batch size and leaves no tensors behind', async () => {
    await useEngine('js');
    const before = tf.memory().numTensors;
    const rows = await benchModel(denseStackDoc([7, 32, 3], 1), { batches: [1, 8], engine: 'js', minMs: 5 });
    expect(rows.map((r) => r.batch)).toEqual([1, 8]);
    for (const r of rows) {
      expect(r.engine).toBe('js');
      expect(r.rowsPerSec).toBeGreaterThan(0);
      expect(r.calls).toBeGreaterThanOrEqual(3);
    }
    expect(tf.memory().numTensors).toBe(before);
    await expect(benchModel(denseStackDoc([7, 3], 1), { batches: [0] })).rejects.toThrow(/positive integers/);
    const fast = await benchModel(denseStackDoc([7, 32, 3], 1), { batches: [4], engine: 'fast', minMs: 5 });
    expect(fast.map((r) => [r.engine, r.batch])).toEqual([['fast', 4]]);
  });
});
