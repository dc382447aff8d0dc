/**
 * NPY score bodies (NumPy NEP 1): a 2-D float32 or float64 array [rows, inputs], C order,
 * little-endian, read into the model's float32 rows (a float32 body on a 4-byte boundary is
 * viewed in place, not copied); the answer is a float32 [rows, outputs] array. Every refusal
 * names what is wrong; nothing is allocated before the header's shape has been checked against
 * the model, the row limit and the bytes the body really carries.
 */
import { endianness } from 'node:os';
import { DataError } from '../errors.js';
import { formatNpyHeader, npyPreamble, parseNpyDict } from '../io/npy-header.js';
import { HttpProblem } from './http-problem.js';
import type { ScoreShape } from './http-rows.js';

const ITEM_BYTES: Readonly<Record<string, 4 | 8>> = { '<f4': 4, '<f8': 8 };
const LITTLE_ENDIAN_HOST = endianness() === 'LE';
/** Names the body in messages taken from the NPY header reader. */
const BODY = 'body';

function shapeText(shape: readonly number[]): string {
  return `(${shape.join(', ')}${shape.length === 1 ? ',' : ''})`;
}

/**
 * Rows x inputs float32 values from an NPY body.
 * @example parseNpyBody(encodeNpy(new Float32Array([1, 2]), [1, 2]), { inputs: 2, features: null, maxRows: 10 }) // { rows: 1, x: Float32Array [1, 2] }
 * @throws HttpProblem 400 (not NPY, a header or data length that lies, wrong dtype, Fortran
 *   order, wrong shape, a value that is not a finite float32) or 413 (rows past the limit).
 */
export function parseNpyBody(bytes: Uint8Array, shape: ScoreShape): { rows: number; x: Float32Array } {
  const head = Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  let descr: string;
  let fortranOrder: boolean;
  let dims: number[];
  let dataOffset: number;
  try {
    const preamble = npyPreamble(BODY, head);
    if (preamble.dictEnd > head.length) {
      throw bad(
        `NPY header says it is ${preamble.dictEnd - preamble.dictStart} bytes long, but the body ends ${head.length - preamble.dictStart} bytes after its start`,
      );
    }
    const dictText = head.toString(preamble.version[0] >= 3 ? 'utf8' : 'latin1', preamble.dictStart, preamble.dictEnd);
    ({ descr, fortranOrder, shape: dims } = parseNpyDict(BODY, dictText));
    dataOffset = preamble.dictEnd;
  } catch (error) {
    if (error instanceof DataError) throw bad(error.message);
    throw error;
  }
  const item = ITEM_BYTES[descr];
  if (!item) {
    const why = descr.startsWith('>') ? 'is big-endian' : 'is not accepted';
    throw bad(`NPY dtype '${descr}' ${why}; send float32 ('<f4') or float64 ('<f8'), little-endian`);
  }
  if (fortranOrder) throw bad('NPY array is in Fortran (column-major) order; send C (row-major) order');
  if (dims.length !== 2) throw bad(`NPY shape ${shapeText(dims)} is not 2-D; send [rows, ${shape.inputs}]`);
  const [rows, width] = dims as [number, number];
  if (width !== shape.inputs) throw bad(`NPY shape ${shapeText(dims)}: the model takes ${shape.inputs} inputs per row, not ${width}`);
  if (rows === 0) throw bad('NPY shape has 0 rows; send at least one row');
  if (rows > shape.maxRows) throw new HttpProblem(413, `NPY shape ${shapeText(dims)}: ${rows} rows pass the limit of ${shape.maxRows} per request`);
  const declared = rows * width * item;
  const carried = head.length - dataOffset;
  if (carried !== declared) {
    throw bad(`NPY header declares ${shapeText(dims)} of '${descr}', ${declared} data bytes, but the body carries ${carried}`);
  }
  const data = head.subarray(dataOffset);
  let x: Float32Array;
  if (item === 4 && LITTLE_ENDIAN_HOST && data.byteOffset % 4 === 0) {
    // The body's own bytes, viewed in place: no copy (the body is this request's alone).
    x = new Float32Array(data.buffer, data.byteOffset, rows * width);
  } else if (item === 4 && LITTLE_ENDIAN_HOST) {
    x = new Float32Array(rows * width);
    new Uint8Array(x.buffer).set(data);
  } else {
    x = new Float32Array(rows * width);
    const view = new DataView(data.buffer, data.byteOffset, data.byteLength);
    // Float32Array stores with IEEE round-to-nearest-even, as Math.fround does.
    for (let i = 0; i < x.length; i++) x[i] = item === 4 ? view.getFloat32(i * 4, true) : view.getFloat64(i * 8, true);
  }
  for (let i = 0; i < x.length; i++) {
    if (!Number.isFinite(x[i])) {
      const r = Math.floor(i / width);
      const c = i - r * width;
      const where = `rows[${r}][${c}]${shape.features ? ` (${shape.features[c]})` : ''}`;
      const given = item === 8 ? new DataView(data.buffer, data.byteOffset + i * 8, 8).getFloat64(0, true) : x[i];
      throw bad(`${where}: ${given} is not a finite float32 number`);
    }
  }
  return { rows, x };
}

/**
 * The NPY answer: float32 [rows, width], format 1.0, data on a 64-byte boundary.
 * @example encodeNpyAnswer(Float32Array.of(0.25, 0.75), 1, 2).length // 64 + 8
 */
export function encodeNpyAnswer(values: Float32Array, rows: number, width: number): Buffer {
  const header = formatNpyHeader('<f4', [rows, width]);
  const out = Buffer.allocUnsafe(header.length + values.length * 4);
  header.copy(out, 0);
  if (LITTLE_ENDIAN_HOST) {
    out.set(new Uint8Array(values.buffer, values.byteOffset, values.byteLength), header.length);
  } else {
    for (let i = 0; i < values.length; i++) out.writeFloatLE(values[i], header.length + i * 4);
  }
  return out;
}

function bad(message: string): HttpProblem {
  return new HttpProblem(400, message);
}
