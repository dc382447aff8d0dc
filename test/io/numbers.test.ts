import { describe, expect, it } from 'vitest';
import { formatFloat32, parseNumberCell } from '../../src/io/index.js';
import { seededRandom } from './helpers.js';

describe('number cells', () => {
  it('agrees with ECMAScript Number() on every string it accepts', () => {
    const accepted = ['0', '-0.5', '+2', '.5', '5.', '1e3', '1E+3', '-1.25e-7', '  42\t', '007'];
    for (const s of accepted) expect(parseNumberCell(s)).toBe(Number(s));
  });

  it('refuses what Number() would turn into something a data file does not mean', () => {
    // Number('') is 0 and Number('0x10') is 16: both are mistakes in a data file.
    for (const s of ['', ' ', 'NaN', 'Infinity', '-Infinity', '0x10', '0b1', '0o7', '1,5', '1 000', 'e5', '.', '1e', '1e999']) {
      expect(parseNumberCell(s)).toBeUndefined();
    }
  });
});

describe('float32 printing (IEEE 754-2008 binary32 via Math.fround)', () => {
  it('reads back as the same float32 and never needs more than 9 significant digits', () => {
    const rand = seededRandom(42);
    const buf = new Float32Array(1);
    const bits = new Uint32Array(buf.buffer);
    for (let i = 0; i < 20_000; i++) {
      // Random bit patterns cover every exponent, subnormals included.
      bits[0] = Math.floor(rand() * 2 ** 32);
      const v = buf[0];
      if (!Number.isFinite(v)) continue;
      const text = formatFloat32(v);
      expect(Math.fround(Number(text))).toBe(v);
      // Significant digits: drop sign, point, exponent, and zeros that only place the point.
      const digits = text.replace(/e.*$/, '').replace(/[-.]/g, '').replace(/^0+/, '').replace(/0+$/, '');
      expect(digits.length).toBeLessThanOrEqual(9);
    }
  });

  it('gives the shortest text for well-known values', () => {
    expect(formatFloat32(0.1)).toBe('0.1');
    expect(formatFloat32(Math.fround(2 / 3))).toBe('0.6666667');
    expect(formatFloat32(3.4028234663852886e38)).toBe('3.4028235e+38'); // largest binary32, from memory
    expect(formatFloat32(2 ** -149)).toBe('1e-45'); // smallest binary32 subnormal
  });
});
