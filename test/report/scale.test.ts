/** Round ticks ("nice numbers": 1, 2, 5 x 10^k; Heckbert, Graphics Gems 1990) and axis transforms. */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { linearAxis, logAxis, niceStep, tickText, valueText } from '../../src/report/scale.js';
import { isNiceStep, labelValue, ticksAreRound } from './read-back.js';

describe('axes (src/report/scale.ts)', () => {
  it('niceStep cuts 0..100 into steps of 20 and 0..0.83 into steps of 0.2 (hand-worked)', () => {
    expect(niceStep(100, 5)).toBe(20);
    expect(niceStep(0.83, 5)).toBeCloseTo(0.2, 15);
    expect(niceStep(7, 5)).toBe(1);
  });
  it('for any data spanning at least a millionth of its size, linear ticks are round, cover the data and map to the pixel range', () => {
    fc.assert(
      fc.property(fc.double({ min: -1e6, max: 1e6, noNaN: true }), fc.double({ min: 1e-6, max: 1e6, noNaN: true }), (a, relative) => {
        // Spans finer than that are below float32 resolution for the values a model produces.
        const span = relative * Math.max(1, Math.abs(a));
        const values = [a, a + span];
        const axis = linearAxis(values, 200, 0);
        expect(isNiceStep(axis.step)).toBe(true);
        expect(ticksAreRound(axis.ticks, false)).toBe(true);
        // Covered to within a millionth of a step (float noise at the ends is not worth a tick).
        expect(axis.lo).toBeLessThanOrEqual(a + axis.step * 1e-6);
        expect(axis.hi).toBeGreaterThanOrEqual(a + span - axis.step * 1e-6);
        expect(axis.toPixel(axis.lo)).toBeCloseTo(200, 6);
        expect(axis.toPixel(axis.hi)).toBeCloseTo(0, 6);
        expect(axis.ticks.length).toBeGreaterThanOrEqual(2);
        expect(axis.ticks.length).toBeLessThanOrEqual(12);
      }),
    );
  });
  it('log ticks sit on powers of ten and cover the data', () => {
    fc.assert(
      fc.property(fc.double({ min: -12, max: 6, noNaN: true }), fc.double({ min: 0, max: 10, noNaN: true }), (e, span) => {
        const values = [10 ** e, 10 ** (e + span)];
        const axis = logAxis(values, 100, 0);
        expect(ticksAreRound(axis.ticks, true)).toBe(true);
        expect(axis.lo).toBeLessThanOrEqual(values[0] * (1 + 1e-9));
        expect(axis.hi).toBeGreaterThanOrEqual(values[1] * (1 - 1e-9));
        expect(axis.ticks.length).toBeLessThanOrEqual(9);
      }),
    );
  });
  it('whole-number axes (epochs) never step below 1', () => {
    expect(linearAxis([1, 3], 0, 100, { minStep: 1 }).ticks).toEqual([1, 2, 3]);
  });
  it('tick labels parse back to the tick value', () => {
    const cases: [number, number, boolean][] = [
      [0.2, 0.2, false],
      [250000, 50000, false],
      [1e-5, Number.NaN, false],
      [3000000, 1e6, false],
      [0.4, 0.2, true],
      [0.05, 0.05, true],
      [0.001, 0.0005, false],
    ];
    for (const [v, step, pct] of cases) expect(labelValue(tickText(v, step, pct)), `${v}`).toBeCloseTo(v, 12);
  });
  it('value labels keep three significant digits', () => {
    expect(valueText(0.123456, false)).toBe('0.123');
    expect(valueText(0.98123, true)).toBe('98.1%');
    expect(valueText(123456, false)).toBe('123k');
    expect(valueText(2.5e-6, false)).toBe('2.50e-6');
  });
});
