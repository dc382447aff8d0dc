import { describe, it, expect } from 'vitest';
import type { Normalisation } from '../../src/model/types.js';
import { normalise64 } from '../../src/reference/index.js';
import { mat64 } from '../../src/model/index.js';
import { FeatureMoments } from '../../src/model/moments.js';
import { combineMoments, updateNormalisation } from '../../src/train/normalisation.js';

const applyNormalisation = (n: Normalisation, data: Float64Array, rows: number, cols: number) => normalise64(n, mat64(rows, cols, data)).data;
import { normals, seededRng } from './seeded.js';

function twoPass(x: Float64Array, rows: number, f: number, c: number): { mean: number; variance: number } {
  let mean = 0;
  for (let r = 0; r < rows; r++) mean += x[r * f + c];
  mean /= rows;
  let ss = 0;
  for (let r = 0; r < rows; r++) ss += (x[r * f + c] - mean) ** 2;
  return { mean, variance: ss / rows };
}

const rows = 500;
const f = 3;
// Large offset: the textbook sum(x^2) - n mean^2 loses digits here, Welford and two-pass do not.
const x = normals(seededRng(5), rows * f, 1e6, 2);

describe('normalisation state (src/train/normalisation.ts)', () => {
  it("Welford's streamed mean and variance agree with the two-pass formula (Welford 1962; Knuth TAOCP 4.2.2)", () => {
    const acc = new FeatureMoments(f);
    acc.add(x.subarray(0, 100 * f), 100);
    acc.add(x.subarray(100 * f), rows - 100);
    const v = acc.variance();
    for (let c = 0; c < f; c++) {
      const ref = twoPass(x, rows, f, c);
      expect(acc.mean[c]).toBeCloseTo(ref.mean, 6);
      expect(Math.abs(v[c] - ref.variance) / ref.variance).toBeLessThan(1e-9);
    }
  });

  it('merging two summaries equals one pass over all rows (Chan, Golub & LeVeque 1979)', () => {
    const a = new FeatureMoments(f);
    a.add(x.subarray(0, 200 * f), 200);
    const b = new FeatureMoments(f);
    b.add(x.subarray(200 * f), rows - 200);
    const merged = combineMoments(a, b);
    for (let c = 0; c < f; c++) {
      const ref = twoPass(x, rows, f, c);
      expect(merged.count).toBe(rows);
      expect(merged.mean[c]).toBeCloseTo(ref.mean, 6);
      expect(Math.abs(merged.m2[c] / rows - ref.variance) / ref.variance).toBeLessThan(1e-9);
    }
  });

  it('fits an empty z-score block, continues it over new rows, or keeps it; never mutates the input', () => {
    const empty: Normalisation = { method: 'zscore', mean: null, std: null, m2: null, count: 0 };
    const fitted = updateNormalisation(empty, x.subarray(0, 300 * f), 300, f, 'keep');
    expect(empty.mean).toBeNull();
    expect(fitted.method === 'zscore' && fitted.count).toBe(300);
    const kept = updateNormalisation(fitted, x.subarray(300 * f), rows - 300, f, 'keep');
    expect(kept).toEqual(fitted);
    expect(kept).not.toBe(fitted);
    const before = structuredClone(fitted);
    const continued = updateNormalisation(fitted, x.subarray(300 * f), rows - 300, f, 'continue');
    expect(fitted).toEqual(before);
    if (continued.method !== 'zscore') throw new Error('method changed');
    expect(continued.count).toBe(rows);
    for (let c = 0; c < f; c++) {
      const ref = twoPass(x, rows, f, c);
      expect(continued.mean![c]).toBeCloseTo(ref.mean, 6);
      expect(continued.std![c]).toBeCloseTo(Math.sqrt(ref.variance), 8);
    }
  });

  it('z-score gives each feature mean 0 and std 1; min-max maps onto [0, 1] (common practice)', () => {
    const z = updateNormalisation({ method: 'zscore', mean: null, std: null, m2: null, count: 0 }, x, rows, f, 'continue');
    const out = applyNormalisation(z, x, rows, f);
    for (let c = 0; c < f; c++) {
      const s = twoPass(out, rows, f, c);
      expect(s.mean).toBeCloseTo(0, 8);
      expect(s.variance).toBeCloseTo(1, 8);
    }
    const mm = updateNormalisation({ method: 'minmax', min: null, max: null, count: 0 }, x, rows, f, 'continue');
    const scaled = applyNormalisation(mm, x, rows, f);
    for (let c = 0; c < f; c++) {
      const col = Array.from({ length: rows }, (_, r) => scaled[r * f + c]);
      expect(Math.min(...col)).toBe(0);
      expect(Math.max(...col)).toBeCloseTo(1, 12);
    }
  });

  it('a constant feature gets std 0 (the reference path then maps it to 0, not NaN)', () => {
    const flat = Float64Array.of(2, 2, 2);
    const z = updateNormalisation({ method: 'zscore', mean: null, std: null, m2: null, count: 0 }, flat, 3, 1, 'keep');
    expect(z.method === 'zscore' && [...z.std!]).toEqual([0]);
    expect([...applyNormalisation(z, flat, 3, 1)]).toEqual([0, 0, 0]);
  });
});
