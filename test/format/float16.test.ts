import { describe, expect, it } from 'vitest';
import { float16Bits, float16Value, fromFloat16, toFloat16 } from '../../src/format/float16.js';
import { seededRandom } from '../fixtures/models.js';

describe('float32 -> binary16 bit patterns (IEEE 754-2008 binary16)', () => {
  it.each([
    [1.0, 0x3c00],
    [-2.0, 0xc000],
    [65504, 0x7bff], // largest finite
    [2 ** -24, 0x0001], // smallest subnormal
    [2 ** -14, 0x0400], // smallest normal
    [0.5, 0x3800],
    [0, 0x0000],
    [-0, 0x8000],
    [Infinity, 0x7c00],
    [-Infinity, 0xfc00],
  ])('%s -> 0x%s', (value, bits) => {
    expect(float16Bits(value)).toBe(bits);
  });

  it('NaN stays NaN: exponent all ones, mantissa non-zero (IEEE 754-2008 3.4)', () => {
    const h = float16Bits(NaN);
    expect(h & 0x7c00).toBe(0x7c00);
    expect(h & 0x03ff).not.toBe(0);
    expect(Number.isNaN(float16Value(h))).toBe(true);
  });

  it('overflow goes to infinity: 65520 (halfway past 65504) and above round to +inf, 65519 to 65504 (IEEE 754-2008 round to nearest even)', () => {
    expect(float16Bits(65520)).toBe(0x7c00);
    expect(float16Bits(1e6)).toBe(0x7c00);
    expect(float16Bits(-1e6)).toBe(0xfc00);
    expect(float16Bits(65519)).toBe(0x7bff);
  });

  it('ties round to even: 1 + 2^-11 -> 0x3C00, 1 + 3*2^-11 -> 0x3C02 (IEEE 754-2008 roundTiesToEven)', () => {
    expect(float16Bits(1 + 2 ** -11)).toBe(0x3c00);
    expect(float16Bits(1 + 3 * 2 ** -11)).toBe(0x3c02);
    // Just above the tie rounds up.
    expect(float16Bits(1 + 2 ** -11 + 2 ** -20)).toBe(0x3c01);
  });

  it('subnormal rounding: 2^-25 ties to 0, 1.5*2^-25 -> 0x0001, 3*2^-25 ties to even 0x0002 (IEEE 754-2008)', () => {
    expect(float16Bits(2 ** -25)).toBe(0x0000);
    expect(float16Bits(1.5 * 2 ** -25)).toBe(0x0001);
    expect(float16Bits(3 * 2 ** -25)).toBe(0x0002);
    expect(float16Bits(5 * 2 ** -25)).toBe(0x0002);
    expect(float16Bits(-(2 ** -24))).toBe(0x8001);
    // The largest subnormal plus half an ulp rounds up into the smallest normal.
    expect(float16Bits(1023 * 2 ** -24 + 2 ** -25)).toBe(0x0400);
  });
});

describe('binary16 -> float32', () => {
  it.each([
    [0x3c00, 1],
    [0xc000, -2],
    [0x7bff, 65504],
    [0x0001, 2 ** -24],
    [0x03ff, 1023 * 2 ** -24],
    [0x3555, 0.333251953125], // nearest binary16 to 1/3 (IEEE 754-2008 binary16, from memory)
    [0x7c00, Infinity],
    [0xfc00, -Infinity],
  ])('0x%s -> %s (IEEE 754-2008 binary16)', (bits, value) => {
    expect(float16Value(bits)).toBe(value);
  });

  it('every one of the 65536 patterns survives binary16 -> binary32 -> binary16 (binary32 holds every binary16 exactly, IEEE 754-2008)', () => {
    const all = Uint16Array.from({ length: 65536 }, (_, i) => i);
    const back = toFloat16(fromFloat16(all));
    let mismatches = 0;
    for (let i = 0; i < 65536; i++) {
      const isNaN = (i & 0x7c00) === 0x7c00 && (i & 0x3ff) !== 0;
      if (isNaN) {
        if ((back[i] & 0x7c00) !== 0x7c00 || (back[i] & 0x3ff) === 0) mismatches++;
      } else if (back[i] !== i) mismatches++;
    }
    expect(mismatches).toBe(0);
  });

  it('typed-array conversion picks the nearest binary16 with ties to even for seeded float32 values (IEEE 754-2008 round to nearest)', () => {
    const random = seededRandom(5);
    const values = Float32Array.from({ length: 20000 }, () => (random() * 2 - 1) * 2 ** (random() * 40 - 26));
    const halves = toFloat16(values);
    const widened = fromFloat16(halves);
    for (let i = 0; i < values.length; i++) {
      const x = values[i];
      const h = halves[i];
      const mine = Math.abs(x - widened[i]);
      // Neighbours one bit pattern away on either side must be no closer.
      for (const neighbour of [h - 1, h + 1]) {
        if ((neighbour & 0x7fff) === 0x7fff || neighbour < 0 || ((neighbour ^ h) & 0x8000) !== 0) continue;
        const other = Math.abs(x - float16Value(neighbour));
        if (other < mine || (other === mine && (h & 1) === 1)) {
          throw new Error(`value ${x}: chose 0x${h.toString(16)} but 0x${neighbour.toString(16)} is nearer or even`);
        }
      }
    }
    expect(halves.length).toBe(values.length);
  });
});
