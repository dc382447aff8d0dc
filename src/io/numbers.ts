/**
 * Number cells: what a data file may spell as a number, and how numbers are printed back.
 */

// Plain decimals with an optional exponent: the subset of what `Number()` accepts that a data
// file means as a number. Hex, binary, octal, "Infinity", "NaN" and the empty string (which
// `Number()` turns into 0) are left out on purpose: in a data file they are mistakes.
const DECIMAL = /^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$/;

/**
 * Parses one cell as a finite float64, or returns undefined when it is not a plain decimal.
 *
 * @example parseNumberCell(' -.5 ') // -0.5
 * @example parseNumberCell('0x10') // undefined
 */
export function parseNumberCell(cell: string): number | undefined {
  // Fast path for the common cell: short, plain digits with at most one point ("0", "12.5").
  const n = cell.length;
  if (n > 0 && n < 16) {
    let point = 0;
    let digits = 0;
    for (let i = 0; i < n; i++) {
      const c = cell.charCodeAt(i);
      if (c >= 48 && c <= 57) digits++;
      else if (c === 46) point++;
      else {
        digits = -1;
        break;
      }
    }
    if (digits > 0 && point <= 1) return Number(cell);
  }
  const text = cell.trim();
  if (!DECIMAL.test(text)) return undefined;
  const value = Number(text);
  // "1e999" is a decimal but overflows float64; treat it as not a number rather than Infinity.
  return Number.isFinite(value) ? value : undefined;
}

/**
 * True for a finite float64 that float32 cannot hold (|v| past 3.4028235e38 after rounding,
 * IEEE 754 binary32): models compute in float32, so such a cell would turn into Infinity / NaN.
 */
export function overflowsFloat32(value: number): boolean {
  return Number.isFinite(value) && !Number.isFinite(Math.fround(value));
}

/** The end of an error message about such a cell. */
export const OUT_OF_FLOAT32 = 'is out of the float32 range (largest finite: 3.4028235e38)';

/** Why a cell failed `parseNumberCell`, in words for an error message. */
export function describeBadNumber(cell: string): string {
  const text = cell.trim();
  if (text === '') return 'is empty';
  if (DECIMAL.test(text)) return 'is out of the float64 range';
  return 'is not a number';
}

/**
 * The shortest decimal that reads back as the same float32 (at most 9 significant digits,
 * IEEE 754-2008 binary32). `String(v)` would print the float64 expansion of the float32,
 * e.g. 0.10000000149011612 for Math.fround(0.1).
 *
 * @example formatFloat32(Math.fround(0.1)) // '0.1'
 */
export function formatFloat32(value: number): string {
  const v = Math.fround(value);
  if (!Number.isFinite(v)) return String(v);
  // If p digits read back as v, so do p + 1 (the nearest (p+1)-digit decimal is at least as
  // close), so the shortest p can be searched for from either side. Most computed values need
  // 7 or 8 digits: start at 7, walk down only while it still reads back.
  let text = v.toPrecision(7);
  if (Math.fround(Number(text)) === v) {
    for (let p = 6; p >= 1; p--) {
      const shorter = v.toPrecision(p);
      if (Math.fround(Number(shorter)) !== v) break;
      text = shorter;
    }
    return trimDecimal(text);
  }
  text = v.toPrecision(8);
  // 9 significant digits always identify a binary32 value.
  if (Math.fround(Number(text)) !== v) text = v.toPrecision(9);
  return trimDecimal(text);
}

/** "0.5000000" -> "0.5", "12.00" -> "12"; exponent forms go through Number for a tidy spelling. */
function trimDecimal(text: string): string {
  if (text.includes('e')) return String(Number(text));
  if (!text.includes('.')) return text;
  let end = text.length;
  while (text.charCodeAt(end - 1) === 48) end--; // '0'
  if (text.charCodeAt(end - 1) === 46) end--; // '.'
  return text.slice(0, end);
}

/** Shortest round-trip text of a float64 (ECMAScript Number::toString already is). */
export function formatFloat64(value: number): string {
  return String(value);
}
