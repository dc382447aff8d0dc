/**
 * IDX arrays (the layout of the MNIST files): two zero bytes, a type code, the number of
 * dimensions, each dimension as a big-endian u32, then the values big-endian, row-major.
 * A gzip-compressed file (as the files are often shipped) is recognised by its magic bytes.
 */
import { readFile } from 'node:fs/promises';
import { gunzip } from 'node:zlib';
import { promisify } from 'node:util';
import { DataError } from '../errors.js';
import { asDataError } from './file-errors.js';

const gunzipAsync = promisify(gunzip);

export type IdxData = Uint8Array | Int8Array | Int16Array | Int32Array | Float32Array | Float64Array;

export interface IdxArray {
  dims: number[];
  data: IdxData;
  /** The IDX type code, e.g. 0x08 for unsigned bytes. */
  typeCode: number;
}

interface IdxType {
  name: string;
  size: number;
  decode(view: DataView, offset: number, count: number): IdxData;
}

function bigEndian<T extends Exclude<IdxData, Uint8Array | Int8Array>>(make: (n: number) => T, size: number, get: (view: DataView, at: number) => number) {
  return (view: DataView, offset: number, count: number): IdxData => {
    const out = make(count);
    for (let i = 0; i < count; i++) out[i] = get(view, offset + i * size);
    return out;
  };
}

const TYPES: Record<number, IdxType> = {
  0x08: { name: 'unsigned byte', size: 1, decode: (v, o, n) => new Uint8Array(v.buffer.slice(v.byteOffset + o, v.byteOffset + o + n)) },
  0x09: { name: 'signed byte', size: 1, decode: (v, o, n) => new Int8Array(v.buffer.slice(v.byteOffset + o, v.byteOffset + o + n)) },
  0x0b: {
    name: 'short',
    size: 2,
    decode: bigEndian(
      (n) => new Int16Array(n),
      2,
      (v, a) => v.getInt16(a, false),
    ),
  },
  0x0c: {
    name: 'int',
    size: 4,
    decode: bigEndian(
      (n) => new Int32Array(n),
      4,
      (v, a) => v.getInt32(a, false),
    ),
  },
  0x0d: {
    name: 'float',
    size: 4,
    decode: bigEndian(
      (n) => new Float32Array(n),
      4,
      (v, a) => v.getFloat32(a, false),
    ),
  },
  0x0e: {
    name: 'double',
    size: 8,
    decode: bigEndian(
      (n) => new Float64Array(n),
      8,
      (v, a) => v.getFloat64(a, false),
    ),
  },
};

const hex32 = (n: number): string => '0x' + n.toString(16).padStart(8, '0');

/**
 * Decodes IDX bytes (already decompressed).
 *
 * @example decodeIdx('labels', Buffer.from([0, 0, 8, 1, 0, 0, 0, 2, 7, 3])) // { dims: [2], data: Uint8Array [7, 3] }
 * @throws DataError for a wrong magic, an unknown type code, or data shorter or longer than the dimensions say.
 */
export function decodeIdx(file: string, bytes: Uint8Array): IdxArray {
  if (bytes.length < 4) throw new DataError(file, 0, 0, `not an IDX file: only ${bytes.length} bytes`);
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const magic = view.getUint32(0, false);
  const typeCode = bytes[2];
  const rank = bytes[3];
  const type = TYPES[typeCode];
  if (bytes[0] !== 0 || bytes[1] !== 0 || !type || rank === 0) {
    throw new DataError(
      file,
      0,
      0,
      `not an IDX file: magic ${hex32(magic)} (expected 0x000008NN..0x00000eNN, e.g. 0x00000801 for labels, 0x00000803 for images)`,
    );
  }
  const headerBytes = 4 + 4 * rank;
  if (bytes.length < headerBytes)
    throw new DataError(file, 0, 0, `IDX header is truncated: ${rank} dimensions need ${headerBytes} bytes, the file has ${bytes.length}`);
  const dims: number[] = [];
  for (let d = 0; d < rank; d++) dims.push(view.getUint32(4 + 4 * d, false));
  const count = dims.reduce((a, b) => a * b, 1);
  const need = count * type.size;
  const have = bytes.length - headerBytes;
  if (have !== need) {
    const what = have < need ? 'truncated' : 'longer than its dimensions say';
    throw new DataError(file, 0, 0, `IDX data is ${what}: dimensions [${dims.join(', ')}] of ${type.name} need ${need} bytes, found ${have}`);
  }
  return { dims, data: type.decode(view, headerBytes, count), typeCode };
}

/**
 * Reads an IDX file, gunzipping it first when it starts with the gzip magic 1f 8b.
 *
 * @example const { dims, data } = await readIdx('train-labels-idx1-ubyte.gz'); // dims [60000]
 */
export async function readIdx(path: string): Promise<IdxArray> {
  let bytes: Buffer;
  try {
    bytes = await readFile(path);
  } catch (error) {
    throw asDataError(path, error);
  }
  if (bytes.length >= 2 && bytes[0] === 0x1f && bytes[1] === 0x8b) {
    try {
      bytes = await gunzipAsync(bytes);
    } catch (error) {
      throw new DataError(path, 0, 0, `gzip data is damaged or truncated (${error instanceof Error ? error.message : String(error)})`);
    }
  }
  return decodeIdx(path, bytes);
}
