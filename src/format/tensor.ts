/**
 * One tensor <-> its file form (dtype code, shape, little-endian bytes, i8 scales).
 * Decoding checks the declared shape with safe integer arithmetic against the bytes actually
 * present BEFORE allocating anything, so a hostile shape cannot make the reader allocate more
 * than the payload could hold.
 */
import type { Problem } from '../errors.js';
import type { StorageCodec } from '../model/types.js';
import { bytesToFloat32, bytesToUint16, float32ToBytes, uint16ToBytes } from './bytes.js';
import { FLOAT16_MAX, fromFloat16, toFloat16 } from './float16.js';
import { dequantiseColumns, quantiseColumns, rememberStoredCodes } from './int8.js';
import { DTYPE_BYTES, DTYPE_CODES, type RawTensor } from './payload.js';

export interface DecodedTensor {
  readonly shape: number[];
  readonly data: Float32Array;
  readonly codec: StorageCodec;
}

/** The storage codec of each dtype code in the file. */
export const CODEC_OF_DTYPE = new Map<number, StorageCodec>((Object.keys(DTYPE_CODES) as StorageCodec[]).map((codec) => [DTYPE_CODES[codec], codec]));

/** "[2, 3]" */
export function formatShape(shape: readonly number[]): string {
  return `[${shape.join(', ')}]`;
}

/** How many values fail `bad`, and the first of them; null when none does. */
function findBad(data: ArrayLike<number>, bad: (v: number) => boolean): { count: number; first: number } | null {
  let count = 0;
  let first = -1;
  for (let i = 0; i < data.length; i++) {
    if (bad(data[i])) {
      if (first < 0) first = i;
      count++;
    }
  }
  return count === 0 ? null : { count, first };
}

/** e.g. "3 non-finite values (first at element 7: NaN)", or null when none is bad. */
function describeBad(data: ArrayLike<number>, bad: (v: number) => boolean, what: string, shown: ArrayLike<number> = data): string | null {
  const found = findBad(data, bad);
  if (found === null) return null;
  const plural = found.count === 1 ? '' : 's';
  return `${found.count} ${what} value${plural} (first at element ${found.first}: ${shown[found.first]})`;
}

/**
 * Encode float32 values of a given shape. `i8` quantises per column (the last dimension), so
 * it needs at least one dimension. Returns problems instead of a tensor when the values cannot
 * be stored faithfully (non-finite, or beyond the float16 range).
 */
export function encodeTensor(values: Float32Array, shape: readonly number[], codec: StorageCodec, where: string): RawTensor | Problem[] {
  const problems: Problem[] = [];
  const count = shape.reduce((a, b) => a * b, 1);
  if (count !== values.length) {
    problems.push({ where, message: `${values.length} values do not fill shape ${formatShape(shape)}` });
  }
  const nonFinite = describeBad(values, (v) => !Number.isFinite(v), 'non-finite');
  if (nonFinite) problems.push({ where, message: nonFinite });
  if (problems.length > 0) return problems;

  const base = { shape: [...shape], scales: [] as number[] };
  if (codec === 'f32') return { ...base, dtype: DTYPE_CODES.f32, data: float32ToBytes(values) };
  if (codec === 'f16') {
    const halves = toFloat16(values);
    // A value that rounds past 65504 would become infinity; refuse rather than write it.
    const tooBig = describeBad(halves, (h) => (h & 0x7c00) === 0x7c00, `beyond-float16-range (|x| > ${FLOAT16_MAX})`, values);
    if (tooBig) return [{ where, message: `${tooBig}; store it as f32 or i8` }];
    return { ...base, dtype: DTYPE_CODES.f16, data: uint16ToBytes(halves) };
  }
  if (shape.length === 0) return [{ where, message: 'i8 storage needs at least one dimension (scales are per column)' }];
  const cols = shape[shape.length - 1];
  const rows = cols === 0 ? 0 : values.length / cols;
  const { codes, scales } = quantiseColumns(values, rows, cols);
  return {
    ...base,
    dtype: DTYPE_CODES.i8,
    data: new Uint8Array(codes.buffer, codes.byteOffset, codes.byteLength),
    scales: Array.from(scales),
  };
}

/**
 * Decode and check one tensor from the file. Problems go to `problems` (all of them, named
 * by `where`); returns null when the tensor cannot be used.
 */
export function decodeTensor(raw: RawTensor | null | undefined, where: string, problems: Problem[]): DecodedTensor | null {
  if (raw === null || raw === undefined) {
    problems.push({ where, message: 'tensor is missing' });
    return null;
  }
  const codec = CODEC_OF_DTYPE.get(raw.dtype);
  if (codec === undefined) {
    problems.push({
      where,
      message: raw.dtype === 0 ? 'dtype is not set' : `unknown dtype code ${raw.dtype} (known: 1 = F32, 2 = F16, 3 = I8)`,
    });
    return null;
  }
  const elementBytes = DTYPE_BYTES[codec];
  const available = raw.data.length;
  // Multiply one dimension at a time and stop as soon as the product can no longer fit in the
  // bytes present: this also keeps every intermediate product a safe integer.
  let elements = 1;
  for (const dim of raw.shape) {
    elements *= dim;
    if (!Number.isSafeInteger(elements)) {
      problems.push({ where, message: `shape ${formatShape(raw.shape)} overflows: its element count is not a safe integer` });
      return null;
    }
    if (elements * elementBytes > available) {
      const full = raw.shape.reduce((a, b) => a * b, 1);
      problems.push({
        where,
        message: `shape ${formatShape(raw.shape)} needs ${Number.isSafeInteger(full) ? full * elementBytes : 'more than 2^53'} bytes of ${codec} data, but the tensor holds ${available}`,
      });
      return null;
    }
  }
  const expectedBytes = elements * elementBytes;
  if (expectedBytes !== available) {
    problems.push({
      where,
      message: `holds ${available} bytes, but ${codec} x shape ${formatShape(raw.shape)} needs ${expectedBytes}`,
    });
    return null;
  }
  const shape = [...raw.shape];

  if (codec === 'i8') {
    if (shape.length === 0) {
      problems.push({ where, message: 'an I8 tensor needs at least one dimension (scales are per column)' });
      return null;
    }
    const cols = shape[shape.length - 1];
    if (raw.scales.length !== cols) {
      problems.push({ where, message: `I8 tensor has ${raw.scales.length} scales, expected one per column (${cols})` });
      return null;
    }
    // A zero scale would silently zero the column's codes; the writer gives all-zero columns scale 1.
    const badScale = describeBad(raw.scales, (s) => !Number.isFinite(s) || s <= 0, 'zero, negative or non-finite scale');
    if (badScale) {
      problems.push({ where: `${where}.scales`, message: badScale });
      return null;
    }
    const codes = Int8Array.from(new Int8Array(raw.data.buffer, raw.data.byteOffset, raw.data.byteLength));
    const rows = cols === 0 ? 0 : elements / cols;
    const scales = Float32Array.from(raw.scales);
    const data = dequantiseColumns(codes, scales, rows, cols);
    rememberStoredCodes(data, { codes, scales });
    return { shape, codec, data };
  }
  if (raw.scales.length > 0) {
    problems.push({ where, message: `${codec} tensor carries ${raw.scales.length} scales; only I8 tensors have scales` });
  }
  const data = codec === 'f32' ? bytesToFloat32(raw.data) : fromFloat16(bytesToUint16(raw.data));
  const nonFinite = describeBad(data, (v) => !Number.isFinite(v), 'non-finite');
  if (nonFinite) {
    problems.push({ where, message: nonFinite });
    return null;
  }
  return { shape, codec, data };
}
