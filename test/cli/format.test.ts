import { describe, expect, it } from 'vitest';
import { grouped } from '../../src/cli/format.js';
import { SeededRng } from '../../src/model/index.js';

describe('grouped numbers', () => {
  it('groups thousands with commas, rounding first', () => {
    expect([-0.2, 0, 7, 999, 1000, 12345678.4, 999999.5, -1234567, -999].map(grouped)).toEqual([
      '0',
      '0',
      '7',
      '999',
      '1,000',
      '12,345,678',
      '1,000,000',
      '-1,234,567',
      '-999',
    ]);
  });

  it("agrees with the en-US locale's own grouping (Intl, ECMA-402) on 2,000 seeded values across magnitudes", () => {
    const rng = new SeededRng(5);
    for (let i = 0; i < 2000; i++) {
      const n = (rng.normal() * 10 ** Math.floor(rng.next() * 16)) / 3;
      // One difference on purpose: a value rounding to -0 prints as 0 here, as -0 there.
      expect(grouped(n)).toBe((Math.round(n) || 0).toLocaleString('en-US'));
    }
  });
});
