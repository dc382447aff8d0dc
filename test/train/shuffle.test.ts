import { describe, it, expect } from 'vitest';
import { batchesPerEpoch, epochBatches, gatherRows, shuffledOrder, splitHoldout } from '../../src/train/shuffle.js';
import { seededRng } from './seeded.js';

describe('batching (src/train/shuffle.ts)', () => {
  it.each([
    [10, 1, 10],
    [10, 10, 1],
    [10, 3, 4],
    [150, 32, 5],
    [7, 100, 1],
  ])('n=%i, k=%i makes ceil(n/k)=%i batches (common practice: k=1 stochastic, k=n full batch)', (n, k, expected) => {
    expect(batchesPerEpoch(n, k)).toBe(expected);
    const batches = epochBatches(n, k, seededRng(1));
    expect(batches.length).toBe(expected);
    const all = batches.flatMap((b) => [...b]).sort((a, b) => a - b);
    expect(all).toEqual(Array.from({ length: n }, (_, i) => i));
  });

  it('is reproducible from the seed and reshuffles each epoch', () => {
    const a = seededRng(42);
    const b = seededRng(42);
    const e1a = [...shuffledOrder(50, a)];
    const e1b = [...shuffledOrder(50, b)];
    expect(e1a).toEqual(e1b);
    const e2a = [...shuffledOrder(50, a)];
    expect(e2a).not.toEqual(e1a);
    expect([...shuffledOrder(50, seededRng(43))]).not.toEqual(e1a);
  });

  it('draws each of the 6 permutations of 3 items about equally often (Fisher–Yates is uniform; common practice)', () => {
    const rng = seededRng(7);
    const counts = new Map<string, number>();
    const draws = 12000;
    for (let i = 0; i < draws; i++) {
      const key = [...shuffledOrder(3, rng)].join('');
      counts.set(key, (counts.get(key) ?? 0) + 1);
    }
    expect(counts.size).toBe(6);
    // Chi-square with 5 degrees of freedom: 20.5 is the 0.999 quantile (standard tables).
    const expected = draws / 6;
    let chi = 0;
    for (const c of counts.values()) chi += (c - expected) ** 2 / expected;
    expect(chi).toBeLessThan(20.5);
  });

  it('gathers rows and splits a seeded hold-out without overlap', () => {
    expect([...gatherRows(new Float32Array([1, 2, 3, 4, 5, 6]), 2, Int32Array.of(2, 0))]).toEqual([5, 6, 1, 2]);
    const { train, holdout } = splitHoldout(100, 0.2, seededRng(3));
    expect(holdout.length).toBe(20);
    expect(train.length).toBe(80);
    const seen = new Set([...train, ...holdout]);
    expect(seen.size).toBe(100);
  });
});
