import { describe, expect, it } from 'vitest';
import { dequantiseColumns, quantiseColumns } from '../../src/format/int8.js';
import { randomFloat32, seededRandom } from '../fixtures/models.js';

describe('symmetric per-column int8 quantisation', () => {
  it('round trip error is at most scale/2 per column, scale = maxabs/127 (common practice, symmetric quantisation)', () => {
    const random = seededRandom(3);
    const rows = 37;
    const cols = 11;
    // Columns of very different ranges, so a shared scale would fail the bound.
    const values = randomFloat32(random, rows * cols);
    for (let i = 0; i < values.length; i++) values[i] *= 10 ** ((i % cols) - 5);
    const { codes, scales } = quantiseColumns(values, rows, cols);
    const back = dequantiseColumns(codes, scales, rows, cols);
    for (let c = 0; c < cols; c++) {
      let maxAbs = 0;
      for (let r = 0; r < rows; r++) maxAbs = Math.max(maxAbs, Math.abs(values[r * cols + c]));
      const scale = maxAbs / 127;
      expect(scales[c]).toBe(Math.fround(scale)); // stored as float32
      // Half a step, plus float32 rounding of the scale and of q*scale (relative 2^-23 each, up to 127 steps).
      const bound = scale / 2 + 127 * scale * 2 ** -22;
      for (let r = 0; r < rows; r++) {
        const i = r * cols + c;
        expect(Math.abs(back[i] - values[i])).toBeLessThanOrEqual(bound);
      }
    }
  });

  it('codes stay in [-127, 127] and the largest magnitude of each column maps to +/-127 (symmetric: -128 unused)', () => {
    const values = new Float32Array([1, -4, -0.5, 2, 0.25, -1]);
    const { codes, scales } = quantiseColumns(values, 3, 2);
    expect(Array.from(codes)).toEqual([127, -127, -64, 64, 32, -32]);
    expect(scales[0]).toBe(Math.fround(1 / 127));
    expect(scales[1]).toBe(Math.fround(4 / 127));
  });

  it('an all-zero column gets scale 1 (readers refuse 0) and decodes to zeros', () => {
    const { codes, scales } = quantiseColumns(new Float32Array([0, 3, 0, -3]), 2, 2);
    expect(scales[0]).toBe(1);
    expect(Array.from(dequantiseColumns(codes, scales, 2, 2))).toEqual([0, 3, 0, -3]);
  });

  it('refuses a value count that does not fill the shape', () => {
    expect(() => quantiseColumns(new Float32Array(5), 2, 3)).toThrow(RangeError);
  });
});
