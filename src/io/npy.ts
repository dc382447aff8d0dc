/**
 * NPY arrays (NumPy NEP 1): read little-endian, C-order numeric arrays; write float32 or
 * float64 arrays in format 1.0 with the data on a 64-byte boundary; stream rows out when their
 * count is not known up front.
 */
import { open, readFile, type FileHandle } from 'node:fs/promises';
import { endianness } from 'node:os';
import { DataError } from '../errors.js';
import { openAtomicFile, type AtomicFile } from './atomic-file.js';
import { asDataError } from './file-errors.js';
import {
  formatNpyHeader,
  npyPreamble,
  NPY_PREAMBLE_BYTES,
  parseNpyDict,
  type NpyHeader,
} from './npy-header.js';
import { rowsPerChunk, type TableChunk, type TableOptions, type TableReader } from './table-types.js';

export type NpyArray = Float32Array | Float64Array | Uint8Array | Int8Array | Int32Array;
export type NpyWriteDtype = '<f4' | '<f8';

interface Dtype {
  size: number;
  make(buffer: ArrayBuffer): NpyArray;
}

const DTYPES: Record<string, Dtype> = {
  '<f4': { size: 4, make: (b) => new Float32Array(b) },
  '<f8': { size: 8, make: (b) => new Float64Array(b) },
  '|u1': { size: 1, make: (b) => new Uint8Array(b) },
  '|i1': { size: 1, make: (b) => new Int8Array(b) },
  '<i4': { size: 4, make: (b) => new Int32Array(b) },
};
// Single-byte types have no byte order; NumPy spells them '|u1' but '<u1' means the same.
DTYPES['<u1'] = DTYPES['|u1'];
DTYPES['<i1'] = DTYPES['|i1'];

const LITTLE_ENDIAN_HOST = endianness() === 'LE';

function dtypeOf(file: string, descr: string): Dtype {
  const dtype = DTYPES[descr];
  if (dtype) return dtype;
  if (descr.startsWith('>')) {
    throw new DataError(file, 0, 0, `NPY dtype '${descr}' is big-endian; only little-endian arrays are read (supported: ${Object.keys(DTYPES).join(', ')})`);
  }
  throw new DataError(file, 0, 0, `NPY dtype '${descr}' is not supported (supported: ${Object.keys(DTYPES).join(', ')})`);
}

/** Checks a parsed header and returns the dtype and element count. */
function checkHeader(file: string, header: NpyHeader): { dtype: Dtype; count: number } {
  const dtype = dtypeOf(file, header.descr);
  if (header.fortranOrder) {
    throw new DataError(file, 0, 0, 'NPY array is in Fortran (column-major) order; only C (row-major) order is read');
  }
  if (header.shape.length === 0) throw new DataError(file, 0, 0, 'NPY array is a 0-d scalar; expected at least one dimension');
  const count = header.shape.reduce((a, b) => a * b, 1);
  return { dtype, count };
}

/** Parses the header from the first bytes of a file (`head` must hold the whole header). */
export function decodeNpyHeader(file: string, head: Buffer): NpyHeader {
  const { version, dictStart, dictEnd } = npyPreamble(file, head);
  if (head.length < dictEnd) throw new DataError(file, 0, 0, 'NPY header is truncated');
  const text = head.toString(version[0] >= 3 ? 'utf8' : 'latin1', dictStart, dictEnd);
  return { ...parseNpyDict(file, text), version, dataOffset: dictEnd };
}

function shapeText(shape: readonly number[]): string {
  return `(${shape.join(', ')}${shape.length === 1 ? ',' : ''})`;
}

/** Copies little-endian bytes into a fresh, aligned typed array. */
function bytesToArray(dtype: Dtype, bytes: Uint8Array): NpyArray {
  const buffer = new ArrayBuffer(bytes.length);
  new Uint8Array(buffer).set(bytes);
  if (!LITTLE_ENDIAN_HOST && dtype.size > 1) {
    const u8 = new Uint8Array(buffer);
    for (let i = 0; i < u8.length; i += dtype.size) u8.subarray(i, i + dtype.size).reverse();
  }
  return dtype.make(buffer);
}

/**
 * Decodes a whole NPY file held in memory.
 *
 * @example decodeNpy('x.npy', bytes) // { shape: [3, 4], descr: '<f4', data: Float32Array(12) }
 * @throws DataError for a bad magic, big-endian or unsupported dtype, Fortran order, or data
 *   whose length does not match the shape.
 */
export function decodeNpy(file: string, bytes: Buffer): { shape: number[]; descr: string; data: NpyArray } {
  const header = decodeNpyHeader(file, bytes);
  const { dtype, count } = checkHeader(file, header);
  const have = bytes.length - header.dataOffset;
  const need = count * dtype.size;
  if (have !== need) {
    throw new DataError(file, 0, 0, `NPY data holds ${have} bytes, but shape ${shapeText(header.shape)} of '${header.descr}' needs ${need}`);
  }
  return { shape: header.shape, descr: header.descr, data: bytesToArray(dtype, bytes.subarray(header.dataOffset)) };
}

/** Reads a whole NPY file. @example const { shape, data } = await readNpy('w.npy'); */
export async function readNpy(path: string): Promise<{ shape: number[]; descr: string; data: NpyArray }> {
  let bytes: Buffer;
  try {
    bytes = await readFile(path);
  } catch (error) {
    throw asDataError(path, error);
  }
  return decodeNpy(path, bytes);
}

/**
 * An NPY file in memory: format 1.0, data on a 64-byte boundary.
 *
 * @example encodeNpy(new Float32Array([1, 2, 3, 4]), [2, 2])
 */
export function encodeNpy(data: Float32Array | Float64Array, shape: readonly number[], dtype: NpyWriteDtype = data instanceof Float64Array ? '<f8' : '<f4'): Buffer {
  const count = shape.reduce((a, b) => a * b, 1);
  if (count !== data.length) throw new RangeError(`encodeNpy: shape ${shapeText(shape)} needs ${count} values, got ${data.length}`);
  const header = formatNpyHeader(dtype, shape);
  return Buffer.concat([header, littleEndianBytes(data, dtype)]);
}

/** Writes an NPY file atomically. @example await writeNpy('w.npy', weights, [4, 3]); */
export async function writeNpy(path: string, data: Float32Array | Float64Array, shape: readonly number[], dtype?: NpyWriteDtype): Promise<void> {
  const bytes = encodeNpy(data, shape, dtype);
  const file = await openAtomicFile(path);
  try {
    await file.append(bytes);
    await file.commit();
  } catch (error) {
    await file.abort();
    throw error;
  }
}

/** Values as little-endian '<f4' or '<f8' bytes, converting between float widths as needed. */
export function littleEndianBytes(data: Float32Array | Float64Array, dtype: NpyWriteDtype): Uint8Array {
  const typed = dtype === '<f4' ? (data instanceof Float32Array ? data : Float32Array.from(data)) : data instanceof Float64Array ? data : Float64Array.from(data);
  if (LITTLE_ENDIAN_HOST) return new Uint8Array(typed.buffer, typed.byteOffset, typed.byteLength);
  const out = new Uint8Array(typed.byteLength);
  const view = new DataView(out.buffer);
  for (let i = 0; i < typed.length; i++) {
    if (dtype === '<f4') view.setFloat32(i * 4, typed[i], true);
    else view.setFloat64(i * 8, typed[i], true);
  }
  return out;
}

/**
 * Opens an NPY file as a table (1-D is one column; dimensions after the first are flattened
 * into the row). Reads `chunkRows` rows per read, so memory stays bounded.
 *
 * @example const t = await openNpyTable('x.npy'); t.width // 784 for shape (n, 28, 28)
 */
export async function openNpyTable(path: string, opts: TableOptions = {}): Promise<TableReader> {
  if (opts.textColumns && opts.textColumns.length > 0) {
    throw new DataError(path, 0, 0, 'NPY files hold numbers only; text columns cannot be read from them');
  }
  let handle: FileHandle;
  try {
    handle = await open(path, 'r');
  } catch (error) {
    throw asDataError(path, error);
  }
  let header: NpyHeader;
  let dtype: Dtype;
  let bytesTotal: number;
  try {
    bytesTotal = (await handle.stat()).size;
    const preamble = Buffer.alloc(Math.min(NPY_PREAMBLE_BYTES, bytesTotal));
    await handle.read(preamble, 0, preamble.length, 0);
    const { dictEnd } = npyPreamble(path, preamble);
    const head = Buffer.alloc(Math.min(dictEnd, bytesTotal));
    await handle.read(head, 0, head.length, 0);
    header = decodeNpyHeader(path, head);
    const checked = checkHeader(path, header);
    dtype = checked.dtype;
    const have = bytesTotal - header.dataOffset;
    if (have !== checked.count * dtype.size) {
      throw new DataError(path, 0, 0, `NPY data holds ${have} bytes, but shape ${shapeText(header.shape)} of '${header.descr}' needs ${checked.count * dtype.size}`);
    }
  } catch (error) {
    await handle.close();
    throw asDataError(path, error);
  }
  const rowsTotal = header.shape[0];
  const width = header.shape.slice(1).reduce((a, b) => a * b, 1);
  if (rowsTotal === 0 || width === 0) {
    await handle.close();
    throw new DataError(path, 0, 0, `no data rows (NPY shape ${shapeText(header.shape)})`);
  }
  const rowBytes = width * dtype.size;
  const chunkRows = rowsPerChunk(width, opts.chunkRows);
  let bytesRead = header.dataOffset;
  let closed = false;
  const close = async (): Promise<void> => {
    if (closed) return;
    closed = true;
    await handle.close();
  };

  async function* chunks(): AsyncGenerator<TableChunk> {
    try {
      for (let row = 0; row < rowsTotal && !closed; row += chunkRows) {
        const rows = Math.min(chunkRows, rowsTotal - row);
        const bytes = Buffer.alloc(rows * rowBytes);
        await handle.read(bytes, 0, bytes.length, header.dataOffset + row * rowBytes);
        bytesRead += bytes.length;
        const values = bytesToArray(dtype, bytes);
        yield { rows, data: values instanceof Float64Array ? values : Float64Array.from(values), firstLine: row + 1 };
      }
    } finally {
      await close();
    }
  }

  return {
    columns: null,
    width,
    textColumns: [],
    get bytesRead() {
      return bytesRead;
    },
    bytesTotal,
    chunks,
    close,
  };
}

/** Rows written one batch at a time to an NPY file whose row count is settled at close. */
export interface NpyRowWriter {
  write(rows: number, data: Float32Array | Float64Array): Promise<void>;
  close(): Promise<void>;
  abort(): Promise<void>;
}

// Room for a row count of up to 20 digits (2^64 has 20), so the header never grows.
const RESERVED_ROW_COUNT = 10 ** 20;

/**
 * Streams `rows x width` batches into an NPY file. The header is written first with room for
 * any row count and rewritten with the real count, at the same length, on close.
 *
 * @example
 * const w = await openNpyRowWriter('out.npy', 3);
 * await w.write(2, new Float32Array(6)); await w.close(); // shape (2, 3)
 */
export async function openNpyRowWriter(path: string, width: number, dtype: NpyWriteDtype = '<f4'): Promise<NpyRowWriter> {
  const reserved = formatNpyHeader(dtype, [RESERVED_ROW_COUNT, width]);
  const file: AtomicFile = await openAtomicFile(path);
  let rowsWritten = 0;
  await file.append(formatNpyHeader(dtype, [0, width], reserved.length));
  return {
    async write(rows, data) {
      if (data.length !== rows * width) throw new RangeError(`NPY row writer: ${rows} rows of width ${width} need ${rows * width} values, got ${data.length}`);
      await file.append(littleEndianBytes(data, dtype));
      rowsWritten += rows;
    },
    async close() {
      await file.writeAt(formatNpyHeader(dtype, [rowsWritten, width], reserved.length), 0);
      await file.commit();
    },
    abort: () => file.abort(),
  };
}
