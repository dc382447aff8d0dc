/**
 * The NPY header (NumPy NEP 1): magic "\x93NUMPY", major and minor version bytes, a
 * little-endian header length (u16 for 1.0, u32 for 2.0 and 3.0), then an ASCII (3.0: UTF-8)
 * Python dict literal with 'descr', 'fortran_order' and 'shape', padded with spaces and ended
 * by a newline.
 */
import { DataError } from '../errors.js';

export const NPY_MAGIC = Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]); // \x93NUMPY

/** The data starts on a multiple of this many bytes (NEP 1, format 1.0 as NumPy writes it today). */
export const NPY_ALIGN = 64;

export interface NpyHeader {
  descr: string;
  fortranOrder: boolean;
  shape: number[];
  version: [number, number];
  /** Byte offset of the first data byte. */
  dataOffset: number;
}

/** Bytes to read first: enough for the magic, version and a u32 header length. */
export const NPY_PREAMBLE_BYTES = 12;

/**
 * Reads the magic, version and header length; returns where the dict starts and ends.
 * `head` needs at least NPY_PREAMBLE_BYTES bytes (fewer means a truncated file).
 */
export function npyPreamble(file: string, head: Buffer): { version: [number, number]; dictStart: number; dictEnd: number } {
  if (head.length < 10 || !head.subarray(0, 6).equals(NPY_MAGIC)) {
    throw new DataError(file, 0, 0, 'not an NPY file (it does not start with the magic bytes \\x93NUMPY)');
  }
  const version: [number, number] = [head[6], head[7]];
  if (version[0] === 1) return { version, dictStart: 10, dictEnd: 10 + head.readUInt16LE(8) };
  if (version[0] === 2 || version[0] === 3) {
    if (head.length < 12) throw new DataError(file, 0, 0, 'NPY header is truncated');
    return { version, dictStart: 12, dictEnd: 12 + head.readUInt32LE(8) };
  }
  throw new DataError(file, 0, 0, `NPY format version ${version[0]}.${version[1]} is not supported (1.0, 2.0 and 3.0 are)`);
}

/**
 * Parses the header dict text, e.g. `{'descr': '<f4', 'fortran_order': False, 'shape': (3, 4), }`.
 *
 * @example parseNpyDict('x.npy', "{'descr': '<f8', 'fortran_order': False, 'shape': (5,), }")
 *   // { descr: '<f8', fortranOrder: false, shape: [5] }
 */
export function parseNpyDict(file: string, text: string): { descr: string; fortranOrder: boolean; shape: number[] } {
  const fail = (why: string): DataError => new DataError(file, 0, 0, `NPY header ${why}: ${JSON.stringify(text.trim())}`);
  let at = 0;
  const skipSpace = (): void => {
    while (at < text.length && /\s/.test(text[at])) at++;
  };
  const expect = (ch: string): void => {
    skipSpace();
    if (text[at] !== ch) throw fail(`expected "${ch}" at offset ${at}`);
    at++;
  };
  const peek = (): string => {
    skipSpace();
    return text[at] ?? '';
  };
  const readString = (): string => {
    skipSpace();
    const quote = text[at];
    if (quote !== "'" && quote !== '"') throw fail(`expected a quoted string at offset ${at}`);
    const end = text.indexOf(quote, at + 1);
    if (end < 0) throw fail('has an unclosed string');
    const value = text.slice(at + 1, end);
    at = end + 1;
    return value;
  };
  const readWord = (): string => {
    skipSpace();
    const m = /^[A-Za-z_0-9]+/.exec(text.slice(at));
    if (!m) throw fail(`expected a value at offset ${at}`);
    at += m[0].length;
    return m[0];
  };
  const readTuple = (): number[] => {
    expect('(');
    const dims: number[] = [];
    while (peek() !== ')') {
      const word = readWord().replace(/L$/, ''); // Python 2 wrote longs as 3L
      if (!/^\d+$/.test(word)) throw fail(`has a non-integer dimension "${word}"`);
      dims.push(Number(word));
      if (peek() === ',') at++;
      else if (peek() !== ')') throw fail(`expected "," or ")" at offset ${at}`);
    }
    at++;
    return dims;
  };

  const found: { descr?: string; fortranOrder?: boolean; shape?: number[] } = {};
  expect('{');
  while (peek() !== '}') {
    const key = readString();
    expect(':');
    if (key === 'descr') {
      if (peek() !== "'" && peek() !== '"') throw fail('has a structured dtype in "descr"; only plain numeric dtypes are supported');
      found.descr = readString();
    } else if (key === 'fortran_order') {
      const word = readWord();
      if (word !== 'True' && word !== 'False') throw fail(`has fortran_order ${word}`);
      found.fortranOrder = word === 'True';
    } else if (key === 'shape') {
      found.shape = readTuple();
    } else {
      throw fail(`has an unknown key "${key}"`);
    }
    if (peek() === ',') at++;
    else if (peek() !== '}') throw fail(`expected "," or "}" at offset ${at}`);
  }
  if (found.descr === undefined) throw fail("lacks 'descr'");
  if (found.fortranOrder === undefined) throw fail("lacks 'fortran_order'");
  if (found.shape === undefined) throw fail("lacks 'shape'");
  return { descr: found.descr, fortranOrder: found.fortranOrder, shape: found.shape };
}

/**
 * A format 1.0 header whose data starts on a 64-byte boundary. `minLength` pads it to at
 * least that many bytes, so a header rewritten later with a longer shape keeps its size.
 *
 * @example formatNpyHeader('<f4', [2, 3]).length % 64 // 0
 */
export function formatNpyHeader(descr: string, shape: readonly number[], minLength = 0): Buffer {
  const dims = shape.length === 1 ? `${shape[0]},` : shape.join(', ');
  const dict = `{'descr': '${descr}', 'fortran_order': False, 'shape': (${dims}), }`;
  // magic (6) + version (2) + u16 length (2) + dict + padding + '\n'.
  const unpadded = 10 + dict.length + 1;
  let total = Math.ceil(unpadded / NPY_ALIGN) * NPY_ALIGN;
  if (total < minLength) total = Math.ceil(minLength / NPY_ALIGN) * NPY_ALIGN;
  const headerLength = total - 10;
  if (headerLength > 0xffff) throw new RangeError('NPY 1.0 header longer than 65535 bytes');
  const out = Buffer.alloc(total, 0x20);
  NPY_MAGIC.copy(out, 0);
  out[6] = 1;
  out[7] = 0;
  out.writeUInt16LE(headerLength, 8);
  out.write(dict, 10, 'latin1');
  out[total - 1] = 0x0a;
  return out;
}
