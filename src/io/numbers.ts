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
  const text = cell.trim();
  if (!DECIMAL.test(text)) return undefined;
  const value = Number(text);
  // "1e999" is a decimal but overflows float64; treat it as not a number rather than Infinity.
  return Number.isFinite(value) ? value : undefined;
}

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
  // 6 digits first: "nice" values (0.5, 12.25) stop there and shrink further; others need 7-9.
  if (roundTrips(v, 6)) {
    for (let p = 1; p < 6; p++) if (roundTrips(v, p)) return shortText(v, p);
    return shortText(v, 6);
  }
  for (let p = 7; p < 9; p++) if (roundTrips(v, p)) return shortText(v, p);
  // 9 significant digits always identify a binary32 value.
  return shortText(v, 9);
}

function roundTrips(v: number, digits: number): boolean {
  return Math.fround(Number(v.toPrecision(digits))) === v;
}

function shortText(v: number, digits: number): string {
  // Number(...) then String(...) drops trailing zeros and picks plain or exponent form.
  return String(Number(v.toPrecision(digits)));
}

/** Shortest round-trip text of a float64 (ECMAScript Number::toString already is). */
export function formatFloat64(value: number): string {
  return String(value);
}
