import { afterAll, describe, expect, it } from 'vitest';
import { withinTolerance } from '../../src/check/index.js';
import { TfjsRunner } from '../../src/engine/index.js';
import { mat64, type Normalisation } from '../../src/model/index.js';
import { normalise64 } from '../../src/reference/index.js';
import { denseOf, docOf } from '../fixtures/models.js';

// Common practice: z-score gives each feature mean 0 and standard deviation 1; min-max maps each
// feature onto [0, 1]. A feature with zero spread maps to 0 (our documented choice).
const x = [2, 5, 7, 4, 5, 9, 6, 5, 11, 8, 5, 13]; // 4 rows x 3 features; feature 1 is constant
const rows = 4;
const col = (c: number) => [0, 1, 2, 3].map((r) => x[r * 3 + c]);
const mean = [0, 1, 2].map((c) => col(c).reduce((a, b) => a + b, 0) / rows);
const std = [0, 1, 2].map((c) => Math.sqrt(col(c).reduce((a, v) => a + (v - mean[c]) ** 2, 0) / rows));
const zscore: Normalisation = { method: 'zscore', mean: Float64Array.from(mean), std: Float64Array.from(std), m2: null, count: rows };
const minmax: Normalisation = {
  method: 'minmax',
  min: Float64Array.from([0, 1, 2].map((c) => Math.min(...col(c)))),
  max: Float64Array.from([0, 1, 2].map((c) => Math.max(...col(c)))),
  count: rows,
};
const identity = denseOf([1, 0, 0, 0, 1, 0, 0, 0, 1], [0, 0, 0], 'linear');

describe.each([
  ['zscore', zscore],
  ['minmax', minmax],
] as const)('%s normalisation', (method, norm) => {
  const session = new TfjsRunner(docOf(3, [identity], norm));
  afterAll(() => session.dispose());
  const ref = normalise64(norm, mat64(rows, 3, Float64Array.from(x))).data;

  it(
    method === 'zscore'
      ? 'gives mean 0 and standard deviation 1 per feature (common practice)'
      : 'maps each feature onto [0, 1] with both ends reached (common practice)',
    () => {
      for (const c of [0, 2]) {
        const v = [0, 1, 2, 3].map((r) => ref[r * 3 + c]);
        if (method === 'zscore') {
          const m = v.reduce((a, b) => a + b, 0) / rows;
          expect(m).toBeCloseTo(0, 14);
          expect(Math.sqrt(v.reduce((a, b) => a + (b - m) ** 2, 0) / rows)).toBeCloseTo(1, 14);
        } else {
          expect(Math.min(...v)).toBe(0);
          expect(Math.max(...v)).toBe(1);
        }
      }
    },
  );

  it('maps a constant feature to 0 on both paths', () => {
    const engine = session.run(Float32Array.from(x), rows);
    for (let r = 0; r < rows; r++) {
      expect(ref[r * 3 + 1]).toBe(0);
      expect(engine[r * 3 + 1]).toBe(0);
    }
  });

  it('engine matches the reference within float32 tolerance', () => {
    const engine = session.run(Float32Array.from(x), rows);
    engine.forEach((v, i) => expect(withinTolerance(v, ref[i]), `${i}: ${v} vs ${ref[i]}`).toBe(true));
  });
});

it('an unfitted block (null statistics) passes features through', () => {
  const pending: Normalisation = { method: 'zscore', mean: null, std: null, m2: null, count: 0 };
  expect(Array.from(normalise64(pending, mat64(1, 3, Float64Array.of(1, 2, 3))).data)).toEqual([1, 2, 3]);
  const session = new TfjsRunner(docOf(3, [identity], pending));
  expect(Array.from(session.run(Float32Array.of(1, 2, 3), 1))).toEqual([1, 2, 3]);
  session.dispose();
});
