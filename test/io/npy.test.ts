import { spawnSync } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { decodeNpy, encodeNpy, formatNpyHeader, openNpyFloat32Rows, openNpyRowWriter, parseNpyDict, readNpy, readTable, writeNpy } from '../../src/io/index.js';
import { captureDataError, FIXTURES, seededRandom, tempFolder } from './helpers.js';

const file = tempFolder();
const fixture = (name: string): string => FIXTURES + name;

const hasNumpy = spawnSync('python3', ['-c', 'import numpy'], { encoding: 'utf8' }).status === 0;

/** Loads `path` with NumPy and prints dtype, shape and values as JSON. */
function numpyLoad(path: string): { dtype: string; shape: number[]; values: number[] } {
  const script =
    'import json,sys,numpy as np; a=np.load(sys.argv[1]); print(json.dumps({"dtype": a.dtype.str, "shape": list(a.shape), "values": a.ravel().astype(float).tolist()}))';
  const run = spawnSync('python3', ['-c', script, path], { encoding: 'utf8' });
  if (run.status !== 0) throw new Error(`numpy could not load ${path}: ${run.stderr}`);
  return JSON.parse(run.stdout);
}

describe('NPY reading (files written by NumPy, NEP 1)', () => {
  it("'<f4' 2-D: i / 8 - 0.5, shape (3, 4)", async () => {
    const a = await readNpy(fixture('f4-2d.npy'));
    expect(a.shape).toEqual([3, 4]);
    expect(a.data).toBeInstanceOf(Float32Array);
    expect(Array.from(a.data)).toEqual(Array.from({ length: 12 }, (_, i) => i / 8 - 0.5));
  });

  it("'<f8' 2-D: i * 0.1, shape (2, 3), bit-exact", async () => {
    const a = await readNpy(fixture('f8-2d.npy'));
    expect(a.shape).toEqual([2, 3]);
    expect(a.data).toBeInstanceOf(Float64Array);
    // IEEE 754 double multiplication is the same in NumPy and JavaScript.
    expect(Array.from(a.data)).toEqual(Array.from({ length: 6 }, (_, i) => i * 0.1));
  });

  it("1-D '<f4', and '|u1' and '<i4' arrays", async () => {
    expect(Array.from((await readNpy(fixture('f4-1d.npy'))).data)).toEqual([1.5, -2.25, 3]);
    const u1 = await readNpy(fixture('u1-2d.npy'));
    expect(u1.data).toBeInstanceOf(Uint8Array);
    expect([u1.shape, Array.from(u1.data)]).toEqual([
      [2, 3],
      [0, 1, 2, 3, 4, 5],
    ]);
    const i4 = await readNpy(fixture('i4-1d.npy'));
    expect(i4.data).toBeInstanceOf(Int32Array);
    expect(Array.from(i4.data)).toEqual([-3, 0, 7]);
  });

  it('format version 2.0 (u32 header length)', async () => {
    const bytes = readFileSync(fixture('f8-v2.npy'));
    expect([bytes[6], bytes[7]]).toEqual([2, 0]); // NEP 1: major, minor version bytes
    const a = decodeNpy('f8-v2.npy', bytes);
    expect(a.shape).toEqual([4, 2]);
    expect(Array.from(a.data)).toEqual([0, 0.25, 0.5, 0.75, 1, 1.25, 1.5, 1.75]);
  });

  it('as a table: 1-D is one column; 3-D is refused (not flattened), naming the shape and the fix', async () => {
    const one = await readTable(fixture('f4-1d.npy'));
    expect([one.rows, one.width, one.columns]).toEqual([3, 1, null]);
    const three = await captureDataError(() => readTable(fixture('f4-3d.npy')));
    expect(three.detail).toMatch(/NPY array has 3 dimensions \(2, 2, 2\); a table needs 1 or 2 .* reshape it to \(2, 4\)/);
    // decodeNpy still hands out N-D tensors (weights in a layer spec).
    expect(decodeNpy('f4-3d.npy', readFileSync(fixture('f4-3d.npy'))).shape).toEqual([2, 2, 2]);
  });

  // Values as make-npy.py writes them with NumPy (NEP 1 headers); every common dtype, either
  // byte order, and Fortran order are read as the same numbers in C order.
  it.each([
    ['f4-big-endian.npy', [2, 2], [0, 1, 2, 3]],
    ['f8-big-endian.npy', [3, 2], [0, 0.5, 1, 1.5, 2, 2.5]],
    ['f8-fortran.npy', [2, 3], [0, 1, 2, 3, 4, 5]],
    ['i4-fortran.npy', [3, 4], [0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11]],
    ['i8-1d.npy', [2], [1, 2]],
    ['i8-2d.npy', [2, 3], [5, -1, 0, 2, 7, 1]],
    ['i8-big-endian.npy', [2, 3], [5, -1, 0, 2, 7, 1]],
    ['f2-2d.npy', [2, 3], [-1, -0.75, -0.5, -0.25, 0, 0.25]],
    ['i2-1d.npy', [3], [-32768, 0, 32767]],
    ['u2-1d.npy', [3], [0, 1, 65535]],
    ['u4-1d.npy', [2], [0, 4000000000]],
    ['u8-1d.npy', [2], [0, 2 ** 53]],
    ['b1-1d.npy', [3], [1, 0, 1]],
  ])('reads %s (shape %j) as NumPy wrote it', async (name, shape, values) => {
    const a = await readNpy(fixture(name));
    expect(a.shape).toEqual(shape);
    expect(Array.from(a.data)).toEqual(values);
    const t = await readTable(fixture(name));
    expect([t.rows, t.width]).toEqual([shape[0], shape[1] ?? 1]);
    expect(Array.from(t.data)).toEqual(values);
  });

  it('a float64 value past the float32 range is refused at its row and column as a table', async () => {
    // 1e39 > 3.4028235e38, the largest binary32 (IEEE 754); make-npy.py puts it at row 2, column 2.
    const e = await captureDataError(() => readTable(fixture('f8-past-float32.npy')));
    expect([e.line, e.column]).toEqual([2, 2]);
    expect(e.detail).toMatch(/value 1e\+39 in column 2 is out of the float32 range/);
  });

  it('refuses a dtype that is not a plain number, naming it', async () => {
    const header = formatNpyHeader('<c16', [1]);
    const e = await captureDataError(() => decodeNpy('c.npy', Buffer.concat([header, Buffer.alloc(16)])));
    expect(e.detail).toMatch(/NPY dtype '<c16' is not supported/);
  });

  it('refuses data shorter or longer than the shape, a bad magic, and an unknown version', async () => {
    const bytes = readFileSync(fixture('f4-2d.npy'));
    const short = await captureDataError(() => decodeNpy('s.npy', bytes.subarray(0, bytes.length - 4)));
    expect(short.detail).toBe("NPY data holds 44 bytes, but shape (3, 4) of '<f4' needs 48");
    const long = await captureDataError(() => readTable(file('long.npy', Buffer.concat([bytes, Buffer.alloc(4)]))));
    expect(long.detail).toBe("NPY data holds 52 bytes, but shape (3, 4) of '<f4' needs 48");
    const magic = await captureDataError(() => decodeNpy('m.npy', Buffer.from('PK\u0003\u0004 not npy at all')));
    expect(magic.detail).toMatch(/not an NPY file/);
    const v9 = Buffer.from(bytes);
    v9[6] = 9;
    expect((await captureDataError(() => decodeNpy('v.npy', v9))).detail).toMatch(/version 9\.0 is not supported/);
  });

  it('parses the dict literal forms NumPy has written (NEP 1 examples, from memory for the 3L form)', () => {
    expect(parseNpyDict('x', "{'descr': '<f8', 'fortran_order': False, 'shape': (), }")).toEqual({ descr: '<f8', fortranOrder: false, shape: [] });
    expect(parseNpyDict('x', "{'descr':'<f4','fortran_order':True,'shape':(3L, 4L)}")).toEqual({ descr: '<f4', fortranOrder: true, shape: [3, 4] });
    expect(() => parseNpyDict('x', "{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (1,), }")).toThrow(/structured dtype/);
    expect(() => parseNpyDict('x', "{'descr': '<f4', 'shape': (1,), }")).toThrow(/lacks 'fortran_order'/);
  });
});

describe('NPY float32 rows read straight into the arrays handed out', () => {
  /** Every chunk of a direct reader, concatenated, with each chunk's rows and first row. */
  async function readAll(path: string, chunkRows: number): Promise<{ values: number[]; chunks: [number, number][] } | null> {
    const reader = await openNpyFloat32Rows(path, chunkRows);
    if (!reader) return null;
    const values: number[] = [];
    const chunks: [number, number][] = [];
    for await (const c of reader.chunks()) {
      expect(c.data).toBeInstanceOf(Float32Array);
      expect(c.data.length).toBe(c.rows * reader.width);
      values.push(...c.data);
      chunks.push([c.rows, c.firstLine]);
    }
    expect(reader.bytesRead).toBe(reader.bytesTotal);
    return { values, chunks };
  }

  it('gives the same float32 values as the table reader, in chunks of the asked size with their first rows', async () => {
    const rng = seededRandom(11);
    const data = Float32Array.from({ length: 7 * 5 }, () => rng() * 200 - 100);
    const path = file('direct.npy', encodeNpy(data, [7, 5]));
    const got = await readAll(path, 3);
    expect(got?.chunks).toEqual([
      [3, 1],
      [3, 4],
      [1, 7],
    ]);
    expect(got?.values).toEqual(Array.from(data));
    // The NumPy-written fixture: i / 8 - 0.5, shape (3, 4) (make-npy.py).
    expect((await readAll(fixture('f4-2d.npy'), 4096))?.values).toEqual(Array.from({ length: 12 }, (_, i) => i / 8 - 0.5));
  });

  it('with reuse, two buffers are read into in turn and each chunk still holds its own rows when it is handed out', async () => {
    const data = Float32Array.from({ length: 10 * 3 }, (_, i) => i * 0.5);
    const reader = await openNpyFloat32Rows(file('reuse.npy', encodeNpy(data, [10, 3])), 3, { reuse: true });
    const seen: number[] = [];
    const buffers: ArrayBufferLike[] = [];
    for await (const c of reader!.chunks()) {
      seen.push(...c.data);
      buffers.push(c.data.buffer);
    }
    expect(seen).toEqual(Array.from(data));
    expect(buffers).toHaveLength(4);
    expect([buffers[0] === buffers[2], buffers[1] === buffers[3], buffers[0] === buffers[1]]).toEqual([true, true, false]);
  });

  it.each(['f4-big-endian.npy', 'f8-2d.npy', 'f8-fortran.npy', 'f4-1d.npy', 'i4-fortran.npy'])(
    'hands %s back to the value-by-value reader (null): another byte order, dtype, memory order or rank',
    async (name) => {
      expect(await openNpyFloat32Rows(fixture(name), 16)).toBeNull();
    },
  );

  it('a Fortran-order float32 file is not read as if it were C order', async () => {
    // The same bytes as a C-order (2, 3) array, but the header says Fortran order: columns first (NEP 1).
    const c = encodeNpy(new Float32Array([0, 1, 2, 3, 4, 5]), [2, 3]);
    const fortran = Buffer.from(c.toString('latin1').replace("'fortran_order': False", "'fortran_order': True "), 'latin1');
    expect(fortran.length).toBe(c.length);
    const path = file('fortran-f4.npy', fortran);
    expect(await openNpyFloat32Rows(path, 16)).toBeNull();
    expect(Array.from((await readTable(path)).data)).toEqual([0, 2, 4, 1, 3, 5]);
  });

  it('refuses data shorter than the shape and a missing file, as the table reader does', async () => {
    const bytes = readFileSync(fixture('f4-2d.npy'));
    const short = await captureDataError(() => openNpyFloat32Rows(file('short-direct.npy', bytes.subarray(0, bytes.length - 4)), 16));
    expect(short.detail).toBe("NPY data holds 44 bytes, but shape (3, 4) of '<f4' needs 48");
    await captureDataError(() => openNpyFloat32Rows(file('no-such.npy'), 16));
  });

  it('stops cleanly when the caller leaves mid-file, with the next read already under way', async () => {
    const path = file(
      'early.npy',
      encodeNpy(
        new Float32Array(100 * 4).map((_, i) => i),
        [100, 4],
      ),
    );
    const reader = await openNpyFloat32Rows(path, 10);
    let seen = 0;
    for await (const c of reader!.chunks()) {
      seen += c.rows;
      if (seen >= 20) break;
    }
    expect(seen).toBe(20);
    await reader!.close(); // a second close is harmless
  });
});

describe('NPY writing (NEP 1 format 1.0)', () => {
  it('pads the header so data starts on a 64-byte boundary, ending it with a newline', () => {
    for (const shape of [[1], [3, 4], [123456789, 1000], [7, 8, 9]]) {
      const header = formatNpyHeader('<f4', shape);
      expect(header.length % 64).toBe(0);
      expect(header[header.length - 1]).toBe(0x0a);
      expect(header.readUInt16LE(8)).toBe(header.length - 10);
      expect(header.subarray(0, 8)).toEqual(Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]));
    }
  });

  it('round-trips through our reader bit for bit', () => {
    const rand = seededRandom(3);
    const f4 = Float32Array.from({ length: 35 }, () => rand() * 2 - 1);
    const back = decodeNpy('r.npy', encodeNpy(f4, [5, 7]));
    expect(back.shape).toEqual([5, 7]);
    expect(back.data).toEqual(f4);
  });

  it.skipIf(!hasNumpy)('NumPy reads our files back (needs python3 with numpy; skipped without it)', async () => {
    const rand = seededRandom(11);
    const f4 = Float32Array.from({ length: 12 }, () => rand() * 10 - 5);
    const f8 = Float64Array.from({ length: 5 }, () => rand());
    const p4 = file('ours-f4.npy');
    const p8 = file('ours-f8.npy');
    await writeNpy(p4, f4, [3, 4]);
    await writeNpy(p8, f8, [5]);
    expect(numpyLoad(p4)).toEqual({ dtype: '<f4', shape: [3, 4], values: Array.from(f4) });
    expect(numpyLoad(p8)).toEqual({ dtype: '<f8', shape: [5], values: Array.from(f8) });
  });

  it('streams rows and patches the row count at close, keeping the header length', async () => {
    const path = file('stream.npy');
    const w = await openNpyRowWriter(path, 3);
    await w.write(2, new Float32Array([1, 2, 3, 4, 5, 6]));
    await w.write(1, new Float64Array([7, 8, 9.5]));
    await w.close();
    const bytes = readFileSync(path);
    const headerLength = bytes.readUInt16LE(8) + 10;
    expect(headerLength % 64).toBe(0);
    expect(bytes.length).toBe(headerLength + 9 * 4);
    const back = decodeNpy(path, bytes);
    expect(back.shape).toEqual([3, 3]);
    expect(Array.from(back.data)).toEqual([1, 2, 3, 4, 5, 6, 7, 8, 9.5]);
    if (hasNumpy) expect(numpyLoad(path).shape).toEqual([3, 3]);
  });
});
