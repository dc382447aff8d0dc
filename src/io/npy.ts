/**
 * NPY arrays (NumPy NEP 1): read numeric arrays of any common dtype, byte order and memory order; write float32 or
 * float64 arrays in format 1.0 with the data on a 64-byte boundary; stream rows out when their
 * count is not known up front.
 */
import { open, readFile, type FileHandle } from 'node:fs/promises';
import { endianness } from 'node:os';
import { DataError } from '../errors.js';
import { float16Value } from '../format/index.js';
import { openAtomicFile, type AtomicFile } from './atomic-file.js';
import { asDataError } from './file-errors.js';
import { formatNpyHeader, npyPreamble, NPY_PREAMBLE_BYTES, parseNpyDict, type NpyHeader } from './npy-header.js';
import { columnMask, resolveColumns } from './columns.js';
import { OUT_OF_FLOAT32, overflowsFloat32 } from './numbers.js';
import { rowsPerChunk, type TableChunk, type TableOptions, type TableReader } from './table-types.js';

export type NpyArray = Float32Array | Float64Array | Uint8Array | Int8Array | Int32Array;
export type NpyWriteDtype = '<f4' | '<f8';

/**
 * An NPY dtype: byte order, kind and size, e.g. '<f4' (little-endian float32), '>i8' (big-endian
 * int64), '|u1'. Every plain numeric dtype NumPy writes is read; values become float64 unless the
 * file already holds one of NpyArray's types in the host's byte order.
 */
interface Dtype {
  descr: string;
  kind: 'f' | 'i' | 'u' | 'b';
  size: number;
  littleEndian: boolean;
}

/** Kinds and sizes read, for error messages. */
const READ_DTYPES = ['f2', 'f4', 'f8', 'i1', 'i2', 'i4', 'i8', 'u1', 'u2', 'u4', 'u8', 'b1'];

const LITTLE_ENDIAN_HOST = endianness() === 'LE';

function dtypeOf(file: string, descr: string): Dtype {
  const m = /^([<>|=]?)([fiub])(\d+)$/.exec(descr);
  if (!m || !READ_DTYPES.includes(m[2] + m[3])) {
    throw new DataError(
      file,
      0,
      0,
      `NPY dtype '${descr}' is not supported (numbers only: float16/32/64, int8/16/32/64, uint8/16/32/64, bool, in either byte order)`,
    );
  }
  const size = Number(m[3]);
  // '|' means no byte order (one byte); '=' is the writer's native order, which NumPy records as
  // '<' or '>' anyway: read it as little-endian, NumPy's usual host.
  return { descr, kind: m[2] as Dtype['kind'], size, littleEndian: m[1] !== '>' };
}

/** Checks a parsed header and returns the dtype and element count. */
function checkHeader(file: string, header: NpyHeader): { dtype: Dtype; count: number } {
  const dtype = dtypeOf(file, header.descr);
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

/** The values of `bytes` (whole elements of `dtype`) in a fresh array: the file's own type when the host can hold it as is, else float64. */
function bytesToArray(dtype: Dtype, bytes: Uint8Array): NpyArray {
  const native = dtype.size === 1 || dtype.littleEndian === LITTLE_ENDIAN_HOST;
  if (native) {
    const buffer = new ArrayBuffer(bytes.length);
    new Uint8Array(buffer).set(bytes);
    if (dtype.kind === 'f' && dtype.size === 4) return new Float32Array(buffer);
    if (dtype.kind === 'f' && dtype.size === 8) return new Float64Array(buffer);
    if (dtype.kind === 'i' && dtype.size === 4) return new Int32Array(buffer);
    if (dtype.kind === 'i' && dtype.size === 1) return new Int8Array(buffer);
    if (dtype.kind !== 'f' && dtype.size === 1) return new Uint8Array(buffer);
  }
  const count = bytes.length / dtype.size;
  const out = new Float64Array(count);
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const le = dtype.littleEndian;
  const read = elementReader(dtype, view, le);
  for (let i = 0; i < count; i++) out[i] = read(i * dtype.size);
  return out;
}

function elementReader(dtype: Dtype, view: DataView, le: boolean): (at: number) => number {
  const key = dtype.kind + dtype.size;
  switch (key) {
    case 'f2':
      return (at) => float16Value(view.getUint16(at, le));
    case 'f4':
      return (at) => view.getFloat32(at, le);
    case 'f8':
      return (at) => view.getFloat64(at, le);
    case 'i1':
      return (at) => view.getInt8(at);
    case 'i2':
      return (at) => view.getInt16(at, le);
    case 'i4':
      return (at) => view.getInt32(at, le);
    // 64-bit integers beyond 2^53 round to the nearest float64, as NumPy's own astype(float) does.
    case 'i8':
      return (at) => Number(view.getBigInt64(at, le));
    case 'u2':
      return (at) => view.getUint16(at, le);
    case 'u4':
      return (at) => view.getUint32(at, le);
    case 'u8':
      return (at) => Number(view.getBigUint64(at, le));
    default: // u1, b1
      return (at) => view.getUint8(at);
  }
}

/** A Fortran-order (column-major) array's values rearranged into C (row-major) order. */
function fortranToC(values: NpyArray, shape: readonly number[]): NpyArray {
  if (shape.length < 2) return values;
  const out = new (values.constructor as new (n: number) => NpyArray)(values.length);
  const index = new Array<number>(shape.length).fill(0);
  // Walk the Fortran order (first index fastest), writing each value to its C-order place.
  const cStride = new Array<number>(shape.length);
  let stride = 1;
  for (let d = shape.length - 1; d >= 0; d--) {
    cStride[d] = stride;
    stride *= shape[d];
  }
  for (let f = 0; f < values.length; f++) {
    let c = 0;
    for (let d = 0; d < shape.length; d++) c += index[d] * cStride[d];
    out[c] = values[f];
    for (let d = 0; d < shape.length && ++index[d] === shape[d]; d++) index[d] = 0;
  }
  return out;
}

/**
 * Decodes a whole NPY file held in memory.
 *
 * @example decodeNpy('x.npy', bytes) // { shape: [3, 4], descr: '<f4', data: Float32Array(12) }
 * Big-endian and Fortran-order arrays are converted (values in C order, host byte order).
 * @throws DataError for a bad magic, an unsupported dtype, or data whose length does not match
 *   the shape.
 */
export function decodeNpy(file: string, bytes: Buffer): { shape: number[]; descr: string; data: NpyArray } {
  const header = decodeNpyHeader(file, bytes);
  const { dtype, count } = checkHeader(file, header);
  const have = bytes.length - header.dataOffset;
  const need = count * dtype.size;
  if (have !== need) {
    throw new DataError(file, 0, 0, `NPY data holds ${have} bytes, but shape ${shapeText(header.shape)} of '${header.descr}' needs ${need}`);
  }
  const values = bytesToArray(dtype, bytes.subarray(header.dataOffset));
  return { shape: header.shape, descr: header.descr, data: header.fortranOrder ? fortranToC(values, header.shape) : values };
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
export function encodeNpy(
  data: Float32Array | Float64Array,
  shape: readonly number[],
  dtype: NpyWriteDtype = data instanceof Float64Array ? '<f8' : '<f4',
): Buffer {
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
  const typed =
    dtype === '<f4' ? (data instanceof Float32Array ? data : Float32Array.from(data)) : data instanceof Float64Array ? data : Float64Array.from(data);
  if (LITTLE_ENDIAN_HOST) return new Uint8Array(typed.buffer, typed.byteOffset, typed.byteLength);
  const out = new Uint8Array(typed.byteLength);
  const view = new DataView(out.buffer);
  for (let i = 0; i < typed.length; i++) {
    if (dtype === '<f4') view.setFloat32(i * 4, typed[i], true);
    else view.setFloat64(i * 8, typed[i], true);
  }
  return out;
}

/** What the header settles, and the whole array when it is in Fortran order (read at once). */
interface NpyLayout {
  header: NpyHeader;
  dtype: Dtype;
  bytesTotal: number;
  whole: NpyArray | null;
}

/** Reads and checks the header: a known dtype, data of the size the shape needs, 1 or 2 dimensions. */
async function readCheckedHeader(path: string, handle: FileHandle): Promise<Omit<NpyLayout, 'whole'>> {
  const bytesTotal = (await handle.stat()).size;
  const preamble = Buffer.alloc(Math.min(NPY_PREAMBLE_BYTES, bytesTotal));
  await handle.read(preamble, 0, preamble.length, 0);
  const { dictEnd } = npyPreamble(path, preamble);
  const head = Buffer.alloc(Math.min(dictEnd, bytesTotal));
  await handle.read(head, 0, head.length, 0);
  const header = decodeNpyHeader(path, head);
  const checked = checkHeader(path, header);
  const dtype = checked.dtype;
  const have = bytesTotal - header.dataOffset;
  if (have !== checked.count * dtype.size) {
    throw new DataError(
      path,
      0,
      0,
      `NPY data holds ${have} bytes, but shape ${shapeText(header.shape)} of '${header.descr}' needs ${checked.count * dtype.size}`,
    );
  }
  if (header.shape.length > 2) {
    const flat = `(${header.shape[0]}, ${header.shape.slice(1).reduce((a, b) => a * b, 1)})`;
    throw new DataError(
      path,
      0,
      0,
      `NPY array has ${header.shape.length} dimensions ${shapeText(header.shape)}; a table needs 1 or 2 (rows, columns): reshape it to ${flat} first, e.g. numpy's a.reshape(len(a), -1)`,
    );
  }
  return { header, dtype, bytesTotal };
}

/** The checked header, and the whole array when it is in Fortran order (read at once). */
async function readNpyLayout(path: string, handle: FileHandle): Promise<NpyLayout> {
  const { header, dtype, bytesTotal } = await readCheckedHeader(path, handle);
  const have = bytesTotal - header.dataOffset;
  let whole: NpyArray | null = null;
  if (header.fortranOrder && header.shape.length === 2) {
    const bytes = Buffer.alloc(have);
    await handle.read(bytes, 0, have, header.dataOffset);
    whole = fortranToC(bytesToArray(dtype, bytes), header.shape);
  }
  return { header, dtype, bytesTotal, whole };
}

/**
 * The maker of one table chunk from `rows` rows of values: skipped columns become NaN, float64
 * values past the float32 range are refused (`checkCells` when either can happen), and text
 * columns hand out their numbers as text.
 */
function makeChunkMaker(
  path: string,
  width: number,
  textColumns: number[],
  skipped: Uint8Array,
  checkCells: boolean,
): (row: number, rows: number, values: NpyArray) => TableChunk {
  return (row: number, rows: number, values: NpyArray): TableChunk => {
    const data = values instanceof Float64Array ? values : Float64Array.from(values);
    // Only float64 values can pass the float32 range; skipped columns are never looked at.
    if (checkCells) {
      for (let i = 0; i < data.length; i++) {
        const c = i % width;
        if (skipped[c]) data[i] = Number.NaN;
        else if (overflowsFloat32(data[i])) {
          throw new DataError(path, row + Math.floor(i / width) + 1, c + 1, `value ${data[i]} in column ${c + 1} ${OUT_OF_FLOAT32}`);
        }
      }
    }
    const chunk: TableChunk = { rows, data, firstLine: row + 1 };
    if (textColumns.length > 0) {
      chunk.text = new Map(
        textColumns.map((c) => {
          const cells: string[] = [];
          for (let r = 0; r < rows; r++) cells.push(String(data[r * width + c]));
          for (let r = 0; r < rows; r++) data[r * width + c] = Number.NaN;
          return [c, cells];
        }),
      );
    }
    return chunk;
  };
}

/**
 * Opens a 1-D or 2-D NPY file as a table (1-D is one column). Reads `chunkRows` rows per read,
 * so memory stays bounded; a Fortran-order file is read whole and rearranged first. Text
 * columns (class cells given by position) hand out each number as text ("2" for 2.0), so a
 * target column can hold class indices. Values past the float32 range are refused, naming
 * the row and column.
 *
 * @example const t = await openNpyTable('x.npy'); t.width // 5 for shape (n, 5)
 * @throws DataError for 3-D and larger arrays: their rows are not table rows, and flattening
 *   them silently would hide a wrong shape.
 */
export async function openNpyTable(path: string, opts: TableOptions = {}): Promise<TableReader> {
  let handle: FileHandle;
  try {
    handle = await open(path, 'r');
  } catch (error) {
    throw asDataError(path, error);
  }
  let layout: NpyLayout;
  try {
    layout = await readNpyLayout(path, handle);
  } catch (error) {
    await handle.close();
    throw asDataError(path, error);
  }
  const { header, dtype, bytesTotal, whole } = layout;
  const rowsTotal = header.shape[0];
  const width = header.shape.length === 2 ? header.shape[1] : 1;
  if (rowsTotal === 0 || width === 0) {
    await handle.close();
    throw new DataError(path, 0, 0, `no data rows (NPY shape ${shapeText(header.shape)})`);
  }
  let textColumns: number[];
  let skipped: Uint8Array;
  try {
    textColumns = resolveColumns(null, width, opts.textColumns ?? [], path);
    skipped = columnMask(width, resolveColumns(null, width, opts.skipColumns ?? [], path));
  } catch (error) {
    await handle.close();
    throw error;
  }
  const rowBytes = width * dtype.size;
  const chunkRows = rowsPerChunk(width, opts.chunkRows);
  const mayOverflow = dtype.kind === 'f' && dtype.size === 8;
  const anySkipped = skipped.includes(1);
  let bytesRead = header.dataOffset;
  let closed = false;
  const close = async (): Promise<void> => {
    if (closed) return;
    closed = true;
    await handle.close();
  };

  const toChunk = makeChunkMaker(path, width, textColumns, skipped, mayOverflow || anySkipped);

  async function* chunks(): AsyncGenerator<TableChunk> {
    try {
      for (let row = 0; row < rowsTotal && !closed; row += chunkRows) {
        const rows = Math.min(chunkRows, rowsTotal - row);
        if (whole) {
          bytesRead += rows * rowBytes;
          yield toChunk(row, rows, whole.slice(row * width, (row + rows) * width));
          continue;
        }
        const bytes = Buffer.alloc(rows * rowBytes);
        await handle.read(bytes, 0, bytes.length, header.dataOffset + row * rowBytes);
        bytesRead += bytes.length;
        yield toChunk(row, rows, bytesToArray(dtype, bytes));
      }
    } finally {
      await close();
    }
  }

  return {
    columns: null,
    width,
    textColumns,
    get bytesRead() {
      return bytesRead;
    },
    bytesTotal,
    rowsTotal,
    chunks,
    close,
  };
}

/** Float32 rows read from a file, chunk by chunk (`openNpyFloat32Rows`). */
export interface Float32RowReader {
  readonly width: number;
  readonly rowsTotal: number;
  /** Bytes of the file read so far, and the file's size: for progress bars. */
  readonly bytesRead: number;
  readonly bytesTotal: number;
  /** Yields the rows in order, each chunk a fresh array the caller owns. Can be iterated once. */
  chunks(): AsyncGenerator<{ rows: number; data: Float32Array; firstLine: number }>;
  /** Releases the file; safe to call twice or mid-iteration. */
  close(): Promise<void>;
}

/**
 * Opens a 2-D NPY file of float32 in the host's byte order and C order (what NumPy writes for a
 * float32 array on any common machine) as float32 rows, with no per-value work: each chunk's
 * bytes go from the file straight into the array handed out, and the next chunk's read runs
 * while the caller works on this one. Returns null for any other layout (another dtype, the
 * other byte order, Fortran order, 1-D, no rows), which `openNpyTable` reads value by value.
 *
 * With `reuse`, two buffers are read into in turn, and a chunk's array is overwritten once the
 * next chunk is asked for: for a caller done with each chunk before it takes the next (no fresh
 * memory per chunk to fault in and collect).
 *
 * @example const r = await openNpyFloat32Rows('x.npy', 4096); if (r) for await (const c of r.chunks()) use(c.data, c.rows);
 * @throws DataError for a file that is missing, not NPY, or holds the wrong number of bytes for its shape.
 */
export async function openNpyFloat32Rows(path: string, chunkRows: number, opts: { reuse?: boolean } = {}): Promise<Float32RowReader | null> {
  let handle: FileHandle;
  try {
    handle = await open(path, 'r');
  } catch (error) {
    throw asDataError(path, error);
  }
  let layout: Omit<NpyLayout, 'whole'>;
  try {
    layout = await readCheckedHeader(path, handle);
  } catch (error) {
    await handle.close();
    throw asDataError(path, error);
  }
  const { header, dtype, bytesTotal } = layout;
  const [rowsTotal, width] = header.shape;
  const plain = dtype.kind === 'f' && dtype.size === 4 && dtype.littleEndian === LITTLE_ENDIAN_HOST && !header.fortranOrder;
  if (!plain || header.shape.length !== 2 || rowsTotal === 0 || width === 0) {
    await handle.close();
    return null;
  }
  const perChunk = rowsPerChunk(width, chunkRows);
  const rowBytes = width * 4;
  let bytesRead = header.dataOffset;
  let closed = false;
  // One read at a time: a close waits for the read under way before releasing the file.
  let reading: Promise<unknown> = Promise.resolve();
  const close = async (): Promise<void> => {
    if (closed) return;
    closed = true;
    await reading;
    await handle.close();
  };

  const reused = opts.reuse ? [0, 1].map(() => Buffer.allocUnsafeSlow(perChunk * rowBytes).buffer) : null;
  let turn = 0;

  /** Rows row..row+rows-1, read into a fresh array or the next reused one (unzeroed memory: every byte is overwritten or the read fails). */
  async function readRows(row: number, rows: number): Promise<{ rows: number; data: Float32Array; firstLine: number }> {
    const buffer = reused ? reused[turn++ % 2] : Buffer.allocUnsafeSlow(rows * rowBytes).buffer;
    const bytes = new Uint8Array(buffer, 0, rows * rowBytes);
    const start = header.dataOffset + row * rowBytes;
    for (let done = 0; done < bytes.length;) {
      const { bytesRead: got } = await handle.read(bytes, done, bytes.length - done, start + done);
      if (got === 0)
        throw new DataError(path, row + 1, 0, `NPY file ended at byte ${start + done} while reading row ${row + 1} (was it changed while being read?)`);
      done += got;
    }
    bytesRead += bytes.length;
    return { rows, data: new Float32Array(bytes.buffer, 0, rows * width), firstLine: row + 1 };
  }

  async function* chunks(): AsyncGenerator<{ rows: number; data: Float32Array; firstLine: number }> {
    const next = (row: number): Promise<{ rows: number; data: Float32Array; firstLine: number }> => {
      const read = readRows(row, Math.min(perChunk, rowsTotal - row));
      // Handled here so a read failing while the caller is busy is not an unhandled rejection; the await below still throws it.
      reading = read.catch(() => undefined);
      return read;
    };
    try {
      let pending = next(0);
      for (let row = 0; row < rowsTotal && !closed; row += perChunk) {
        const chunk = await pending;
        if (row + perChunk < rowsTotal) pending = next(row + perChunk);
        yield chunk;
      }
    } finally {
      await close();
    }
  }

  return {
    width,
    rowsTotal,
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
