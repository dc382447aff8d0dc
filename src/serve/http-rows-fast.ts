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

/** The first byte at or after `at` that is not JSON white space. */
function skipSpace(bytes: Uint8Array, at: number, end: number): number {
  while (at < end) {
    const b = bytes[at]!;
    if (b !== SPACE && b !== LF && b !== CR && b !== TAB) return at;
    at++;
  }
  return at;
}

/** Where the number parsed last ended (numberAt's second result; one module-level slot, no allocation). */
let numberEnd = 0;

/**
 * The JSON number starting at `at` as a float64 (NaN when the bytes there are not one), its end
 * in `numberEnd`. The grammar is RFC 8259's: -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][+-]?[0-9]+)?
 */
function numberAt(bytes: Uint8Array, at: number, end: number): number {
  const start = at;
  let b = at < end ? bytes[at]! : 0;
  const negative = b === MINUS;
  if (negative) b = ++at < end ? bytes[at]! : 0;
  let mantissa = 0;
  let digits = 0;
  if (b === ZERO) {
    b = ++at < end ? bytes[at]! : 0;
  } else if (b > ZERO && b <= NINE) {
    // (b - ZERO) >>> 0 <= 9 is one comparison for "a digit" (a byte below '0' wraps around).
    let d = b - ZERO;
    do {
      mantissa = mantissa * 10 + d;
      digits++;
      d = (++at < end ? bytes[at]! : 0) - ZERO;
    } while (d >>> 0 <= 9);
    b = d + ZERO;
  } else {
    return NaN;
  }
  let scale = 0;
  if (b === DOT) {
    const fractionStart = ++at;
    let d = (at < end ? bytes[at]! : 0) - ZERO;
    while (d >>> 0 <= 9) {
      mantissa = mantissa * 10 + d;
      d = (++at < end ? bytes[at]! : 0) - ZERO;
    }
    b = d + ZERO;
    if (at === fractionStart) return NaN;
    digits += at - fractionStart;
    scale = fractionStart - at;
  }
  if (b === LOWER_E || b === UPPER_E) {
    b = ++at < end ? bytes[at]! : 0;
    if (b === PLUS || b === MINUS) b = ++at < end ? bytes[at]! : 0;
    const exponentStart = at;
    while (b >= ZERO && b <= NINE) b = ++at < end ? bytes[at]! : 0;
    if (at === exponentStart) return NaN;
    numberEnd = at;
    // An exponent: Number on the text (its grammar already checked) rounds it correctly.
    return Number(latin1(bytes, start, at));
  }
  numberEnd = at;
  // Clinger's fast path: an exact integer mantissa times or over an exact power of ten is one
  // correctly rounded operation, the same double JSON.parse gives. Anything longer goes through
  // Number on the text.
  if (digits <= 15 && mantissa < EXACT_MANTISSA && scale >= -22) {
    const value = scale === 0 ? mantissa : mantissa / POWERS_OF_TEN[-scale]!;
    return negative ? -value : value;
  }
  return Number(latin1(bytes, start, at));
}

/**
 * Rows x inputs float32 values, or null when the body is not plain number rows of the right
 * width within `maxRows` (the general parser then answers).
 * @example parseNumberRows(Buffer.from('{"rows": [[1, 2.5]]}'), 2, 10) // { rows: 1, x: Float32Array [1, 2.5] }
 */
export function parseNumberRows(bytes: Uint8Array, inputs: number, maxRows: number): { rows: number; x: Float32Array } | null {
  const end = bytes.length;
  let at = skipSpace(bytes, 0, end);
  if (bytes[at] !== OPEN_OBJECT) return null;
  at = skipSpace(bytes, at + 1, end);
  for (const b of ROWS_KEY) if (bytes[at++] !== b) return null;
  at = skipSpace(bytes, at, end);
  if (bytes[at] !== COLON) return null;
  at = skipSpace(bytes, at + 1, end);
  if (bytes[at] !== OPEN_ARRAY) return null;
  at++;

  // Grows by doubling, never past maxRows rows: the body limit already bounds the bytes.
  let x = new Float32Array(Math.min(maxRows, 64) * inputs);
  let rows = 0;
  for (;;) {
    at = skipSpace(bytes, at, end);
    if (bytes[at] !== OPEN_ARRAY) return null;
    at++;
    if (rows === maxRows) return null;
    if ((rows + 1) * inputs > x.length) {
      const grown = new Float32Array(Math.min(maxRows, rows * 2) * inputs);
      grown.set(x);
      x = grown;
    }
    const base = rows * inputs;
    for (let c = 0; c < inputs; c++) {
      if (c > 0) {
        // The common separator is a bare comma; white space around it takes the slower way.
        if (bytes[at] !== COMMA) {
          at = skipSpace(bytes, at, end);
          if (bytes[at] !== COMMA) return null;
        }
        at++;
      }
      let b = bytes[at];
      if (b === SPACE || b === LF || b === CR || b === TAB) at = skipSpace(bytes, at, end);
      const f = Math.fround(numberAt(bytes, at, end));
      // NaN (not a number here) or an infinity: the general parser says which value.
      if (f - f !== 0) return null;
      x[base + c] = f;
      at = numberEnd;
      b = bytes[at];
    }
    at = skipSpace(bytes, at, end);
    if (bytes[at] !== CLOSE_ARRAY) return null;
    rows++;
    at = skipSpace(bytes, at + 1, end);
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
  at = skipSpace(bytes, at, end);
  if (bytes[at] !== CLOSE_OBJECT) return null;
  if (skipSpace(bytes, at + 1, end) !== end) return null;
  return { rows, x: rows * inputs === x.length ? x : x.slice(0, rows * inputs) };
}

function latin1(bytes: Uint8Array, from: number, to: number): string {
  let s = '';
  for (let i = from; i < to; i++) s += String.fromCharCode(bytes[i]!);
  return s;
}
