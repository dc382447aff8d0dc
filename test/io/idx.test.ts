import { gzipSync } from 'node:zlib';
import { describe, expect, it } from 'vitest';
import { decodeIdx, readIdx } from '../../src/io/index.js';
import { captureDataError, tempFolder } from './helpers.js';

const file = tempFolder();

/** Builds IDX bytes by hand per the layout on LeCun's MNIST page: 0, 0, type, rank, dims (u32 MSB first), data MSB first. */
function idxBytes(typeCode: number, dims: number[], data: number[], elementSize: number, put: (view: DataView, at: number, v: number) => void): Buffer {
  const out = Buffer.alloc(4 + 4 * dims.length + data.length * elementSize);
  out[2] = typeCode;
  out[3] = dims.length;
  dims.forEach((d, i) => out.writeUInt32BE(d, 4 + 4 * i));
  const view = new DataView(out.buffer, out.byteOffset, out.byteLength);
  data.forEach((v, i) => put(view, 4 + 4 * dims.length + i * elementSize, v));
  return out;
}

describe("IDX (layout from LeCun's MNIST page)", () => {
  it('reads a label vector, magic 0x00000801', () => {
    const bytes = idxBytes(0x08, [4], [7, 2, 1, 0], 1, (v, a, x) => v.setUint8(a, x));
    expect(bytes.readUInt32BE(0)).toBe(0x00000801); // the label files' magic number
    const a = decodeIdx('labels', bytes);
    expect(a.dims).toEqual([4]);
    expect(a.data).toBeInstanceOf(Uint8Array);
    expect(Array.from(a.data)).toEqual([7, 2, 1, 0]);
  });

  it('reads 3-D images, magic 0x00000803, row-major', () => {
    const pixels = Array.from({ length: 2 * 3 * 2 }, (_, i) => (i * 21) % 256);
    const bytes = idxBytes(0x08, [2, 3, 2], pixels, 1, (v, a, x) => v.setUint8(a, x));
    expect(bytes.readUInt32BE(0)).toBe(0x00000803); // the image files' magic number
    const a = decodeIdx('images', bytes);
    expect(a.dims).toEqual([2, 3, 2]);
    expect(Array.from(a.data)).toEqual(pixels);
  });

  it.each([
    ['09', 0x09, 1, [-128, 5, 127], (v: DataView, a: number, x: number) => v.setInt8(a, x), Int8Array],
    ['0b', 0x0b, 2, [-300, 0, 32767], (v: DataView, a: number, x: number) => v.setInt16(a, x, false), Int16Array],
    ['0c', 0x0c, 4, [-70000, 1, 2 ** 31 - 1], (v: DataView, a: number, x: number) => v.setInt32(a, x, false), Int32Array],
    ['0d', 0x0d, 4, [1.5, -0.25, 3e8], (v: DataView, a: number, x: number) => v.setFloat32(a, x, false), Float32Array],
    ['0e', 0x0e, 8, [0.1, -1e-300, 2 ** 60], (v: DataView, a: number, x: number) => v.setFloat64(a, x, false), Float64Array],
  ])('type code 0x%s reads big-endian values', (_hex, code, size, values, put, kind) => {
    const a = decodeIdx('t', idxBytes(code, [3], values, size, put));
    expect(a.data).toBeInstanceOf(kind);
    expect(Array.from(a.data)).toEqual(values);
  });

  it('refuses a wrong magic, naming it', async () => {
    const npyLike = Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0, 0, 0, 0]);
    const e = await captureDataError(() => decodeIdx('x.idx', npyLike));
    expect(e.detail).toMatch(/^not an IDX file: magic 0x934e554d/);
    const badType = idxBytes(0x0a, [1], [0], 1, (v, a, x) => v.setUint8(a, x));
    expect((await captureDataError(() => decodeIdx('x.idx', badType))).detail).toMatch(/magic 0x00000a01/);
  });

  it('refuses truncated data and a truncated header', async () => {
    const full = idxBytes(0x08, [2, 2, 2], [1, 2, 3, 4, 5, 6, 7, 8], 1, (v, a, x) => v.setUint8(a, x));
    const e = await captureDataError(() => decodeIdx('t.idx', full.subarray(0, full.length - 3)));
    expect(e.detail).toBe('IDX data is truncated: dimensions [2, 2, 2] of unsigned byte need 8 bytes, found 5');
    const h = await captureDataError(() => decodeIdx('t.idx', full.subarray(0, 9)));
    expect(h.detail).toMatch(/header is truncated/);
  });

  it('reads gzip-compressed files and refuses damaged gzip', async () => {
    const bytes = idxBytes(0x08, [3], [9, 8, 7], 1, (v, a, x) => v.setUint8(a, x));
    const a = await readIdx(file('labels-idx1-ubyte.gz', gzipSync(bytes)));
    expect(Array.from(a.data)).toEqual([9, 8, 7]);
    const plain = await readIdx(file('labels-idx1-ubyte', bytes));
    expect(Array.from(plain.data)).toEqual([9, 8, 7]);
    const gz = gzipSync(bytes);
    const e = await captureDataError(() => readIdx(file('cut.gz', gz.subarray(0, gz.length - 6))));
    expect(e.detail).toMatch(/gzip data is damaged or truncated/);
  });
});
