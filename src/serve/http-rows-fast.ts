/**
 * The score body's common case, `{"rows": [[number, ...], ...]}`, read straight from the bytes
 * into a Float32Array: no string, no array of arrays, no boxed numbers. Anything else (objects
 * keyed by feature, a wrong width, a value that is not a finite float32, other keys, non-ASCII
 * bytes, bad JSON) returns null, and the general parser in http-rows.ts reads the body again
 * and gives its usual message, so no message depends on which path ran.
 */

const SPACE = 0x20;
const TAB = 0x09;
const LF = 0x0a;
const CR = 0x0d;
const COMMA = 0x2c;
const OPEN_ARRAY = 0x5b;
const CLOSE_ARRAY = 0x5d;
const OPEN_OBJECT = 0x7b;
const CLOSE_OBJECT = 0x7d;
const COLON = 0x3a;
const MINUS = 0x2d;
const PLUS = 0x2b;
const DOT = 0x2e;
const ZERO = 0x30;
const NINE = 0x39;
const LOWER_E = 0x65;
const UPPER_E = 0x45;
/** `"rows"` as bytes. */
const ROWS_KEY = [0x22, 0x72, 0x6f, 0x77, 0x73, 0x22];

/** 10^0 .. 10^22: every one exact in float64 (5^22 < 2^53). */
const POWERS_OF_TEN = Array.from({ length: 23 }, (_, i) => Number(`1e${i}`));
const EXACT_MANTISSA = 2 ** 53;

/**
 * Rows x inputs float32 values, or null when the body is not plain number rows of the right
 * width within `maxRows` (the general parser then answers).
 * @example parseNumberRows(Buffer.from('{"rows": [[1, 2.5]]}'), 2, 10) // { rows: 1, x: Float32Array [1, 2.5] }
 */
export function parseNumberRows(bytes: Uint8Array, inputs: number, maxRows: number): { rows: number; x: Float32Array } | null {
  const end = bytes.length;
  let at = 0;
  const skip = (): void => {
    while (at < end) {
      const b = bytes[at]!;
      if (b !== SPACE && b !== LF && b !== CR && b !== TAB) return;
      at++;
    }
  };
  const take = (b: number): boolean => {
    skip();
    if (bytes[at] !== b) return false;
    at++;
    return true;
  };

  if (!take(OPEN_OBJECT)) return null;
  skip();
  for (const b of ROWS_KEY) if (bytes[at++] !== b) return null;
  if (!take(COLON) || !take(OPEN_ARRAY)) return null;

  // Grows by doubling, never past maxRows rows: the body limit already bounds the bytes.
  let x = new Float32Array(Math.min(maxRows, 64) * inputs);
  let rows = 0;
  for (;;) {
    if (!take(OPEN_ARRAY)) return null;
    if (rows === maxRows) return null;
    if ((rows + 1) * inputs > x.length) {
      const grown = new Float32Array(Math.min(maxRows, rows * 2) * inputs);
      grown.set(x);
      x = grown;
    }
    const base = rows * inputs;
    for (let c = 0; c < inputs; c++) {
      if (c > 0 && !take(COMMA)) return null;
      skip();
      // The number's grammar is RFC 8259's: -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)?
      const start = at;
      let negative = false;
      if (bytes[at] === MINUS) {
        negative = true;
        at++;
      }
      let mantissa = 0;
      let digits = 0;
      let scale = 0;
      const first = bytes[at];
      if (first === ZERO) {
        at++;
      } else if (first !== undefined && first > ZERO && first <= NINE) {
        while (at < end && bytes[at]! >= ZERO && bytes[at]! <= NINE) {
          mantissa = mantissa * 10 + (bytes[at]! - ZERO);
          digits++;
          at++;
        }
      } else {
        return null;
      }
      if (bytes[at] === DOT) {
        at++;
        const fractionStart = at;
        while (at < end && bytes[at]! >= ZERO && bytes[at]! <= NINE) {
          mantissa = mantissa * 10 + (bytes[at]! - ZERO);
          digits++;
          at++;
        }
        if (at === fractionStart) return null;
        scale = fractionStart - at;
      }
      let exponentGiven = false;
      if (bytes[at] === LOWER_E || bytes[at] === UPPER_E) {
        exponentGiven = true;
        at++;
        if (bytes[at] === PLUS || bytes[at] === MINUS) at++;
        const exponentStart = at;
        while (at < end && bytes[at]! >= ZERO && bytes[at]! <= NINE) at++;
        if (at === exponentStart) return null;
      }
      let value: number;
      // Clinger's fast path: an exact integer mantissa times or over an exact power of ten is
      // one correctly rounded operation, the same double JSON.parse gives. Anything longer or
      // with an exponent goes through Number on the text (its grammar already checked).
      if (!exponentGiven && mantissa < EXACT_MANTISSA && digits <= 15 && scale >= -22) {
        value = scale === 0 ? mantissa : mantissa / POWERS_OF_TEN[-scale]!;
        if (negative) value = -value;
      } else {
        value = Number(latin1(bytes, start, at));
      }
      const f = Math.fround(value);
      if (f - f !== 0) return null; // NaN or an infinity: the general parser says which value
      x[base + c] = f;
    }
    if (!take(CLOSE_ARRAY)) return null;
    rows++;
    skip();
    if (bytes[at] === COMMA) {
      at++;
      continue;
    }
    if (bytes[at] === CLOSE_ARRAY) {
      at++;
      break;
    }
    return null;
  }
  if (!take(CLOSE_OBJECT)) return null;
  skip();
  if (at !== end) return null;
  return { rows, x: rows * inputs === x.length ? x : x.slice(0, rows * inputs) };
}

function latin1(bytes: Uint8Array, from: number, to: number): string {
  let s = '';
  for (let i = from; i < to; i++) s += String.fromCharCode(bytes[i]!);
  return s;
}
