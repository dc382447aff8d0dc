import { spawnSync } from 'node:child_process';
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { dirname } from 'node:path';
import { describe, expect, it } from 'vitest';
import { ShapeError } from '../../src/errors.js';
import { openTableWriter, readNpy, readTable } from '../../src/io/index.js';
import { captureDataError, seededRandom, tempFolder } from './helpers.js';

const file = tempFolder();
const hasNumpy = spawnSync('python3', ['-c', 'import numpy'], { encoding: 'utf8' }).status === 0;

function seededF32(seed: number, n: number): Float32Array {
  const rand = seededRandom(seed);
  // A spread of magnitudes so exponent forms show up too.
  return Float32Array.from({ length: n }, (_, i) => (rand() * 2 - 1) * 10 ** ((i % 13) - 6));
}

describe('table writers', () => {
  it('CSV: a header of names, then float32 values that read back bit for bit (IEEE 754 binary32 via Math.fround)', async () => {
    const values = seededF32(5, 3 * 400);
    const path = file('out.csv');
    const w = await openTableWriter(path, ['p,good', 'p "bad"', 'score']);
    await w.write(200, values.subarray(0, 600));
    await w.write(200, values.subarray(600));
    await w.close();
    const text = readFileSync(path, 'utf8');
    expect(text.split('\n')[0]).toBe('"p,good","p ""bad""",score'); // RFC 4180 quoting
    const back = await readTable(path);
    expect(back.columns).toEqual(['p,good', 'p "bad"', 'score']);
    expect(Float32Array.from(back.data)).toEqual(values);
  });

  it('CSV: float32 values print short (0.1, not 0.10000000149011612)', async () => {
    const path = file('short.csv');
    const w = await openTableWriter(path, ['a', 'b', 'c', 'd']);
    await w.write(1, new Float32Array([0.1, 1 / 3, 1e-7, 16777216]));
    await w.close();
    // The shortest decimals that round to these float32 values (IEEE 754 binary32).
    expect(readFileSync(path, 'utf8').split('\n')[1]).toBe('0.1,0.33333334,1e-7,16777216');
  });

  it('CSV: float64 data keeps full float64 precision', async () => {
    const path = file('f64.csv');
    const w = await openTableWriter(path, ['x']);
    await w.write(2, new Float64Array([0.1 + 0.2, Math.PI]));
    await w.close();
    const back = await readTable(path);
    expect(Array.from(back.data)).toEqual([0.1 + 0.2, Math.PI]);
  });

  it('JSONL: objects keyed by column name by default, arrays on request; both read back', async () => {
    const values = seededF32(9, 6);
    const objects = file('o.jsonl');
    const w = await openTableWriter(objects, ['x', 'y']);
    await w.write(3, values);
    await w.close();
    const firstLine = JSON.parse(readFileSync(objects, 'utf8').split('\n')[0]);
    expect(Object.keys(firstLine)).toEqual(['x', 'y']);
    const back = await readTable(objects);
    expect(back.columns).toEqual(['x', 'y']);
    expect(Float32Array.from(back.data)).toEqual(values);

    const arrays = file('a.jsonl');
    const v = await openTableWriter(arrays, ['x', 'y'], { jsonlRows: 'arrays' });
    await v.write(3, values);
    await v.close();
    expect(readFileSync(arrays, 'utf8').startsWith('[')).toBe(true);
    expect(Float32Array.from((await readTable(arrays)).data)).toEqual(values);
  });

  it('JSONL: NaN and Infinity become null (JSON has neither, RFC 8259 section 6)', async () => {
    const path = file('nan.jsonl');
    const w = await openTableWriter(path, ['a', 'b'], { jsonlRows: 'arrays' });
    await w.write(1, new Float32Array([Number.NaN, Number.POSITIVE_INFINITY]));
    await w.close();
    expect(readFileSync(path, 'utf8')).toBe('[null,null]\n');
  });

  it('NPY: float32 rows x width, data on a 64-byte boundary (NEP 1)', async () => {
    const values = seededF32(2, 4 * 5);
    const path = file('out.npy');
    const w = await openTableWriter(path, ['a', 'b', 'c', 'd']);
    for (let r = 0; r < 5; r++) await w.write(1, values.subarray(r * 4, r * 4 + 4));
    await w.close();
    const bytes = readFileSync(path);
    expect((bytes.readUInt16LE(8) + 10) % 64).toBe(0);
    const back = await readNpy(path);
    expect(back.shape).toEqual([5, 4]);
    expect(back.data).toEqual(values);
    if (hasNumpy) {
      const run = spawnSync('python3', ['-c', 'import sys,numpy as np; a=np.load(sys.argv[1]); print(a.dtype.str, a.shape)', path], { encoding: 'utf8' });
      expect(run.stdout.trim()).toBe('<f4 (5, 4)');
    }
  });

  it('writes atomically: nothing at the target until close, no temporary file left after abort', async () => {
    const path = file('atomic.csv');
    const w = await openTableWriter(path, ['a']);
    await w.write(1, new Float32Array([1]));
    expect(existsSync(path)).toBe(false);
    await w.close();
    expect(readFileSync(path, 'utf8')).toBe('a\n1\n');

    const w2 = await openTableWriter(path, ['a']);
    await w2.write(1, new Float32Array([2]));
    await w2.abort();
    expect(readFileSync(path, 'utf8')).toBe('a\n1\n');
    expect(readdirSync(dirname(path)).filter((n) => n.includes('atomic.csv') && n !== 'atomic.csv')).toEqual([]);
  });

  it('refuses a data length that does not match rows x columns, bad names, unknown extensions', async () => {
    const w = await openTableWriter(file('shape.csv'), ['a', 'b']);
    await expect(w.write(2, new Float32Array(3))).rejects.toBeInstanceOf(ShapeError);
    await w.abort();
    expect((await captureDataError(() => openTableWriter(file('dup.csv'), ['a', 'a']))).detail).toMatch(/"a" is repeated/);
    expect((await captureDataError(() => openTableWriter(file('x.parquet'), ['a']))).detail).toMatch(/supported: \.csv, \.jsonl, \.npy/);
    expect((await captureDataError(() => openTableWriter(file('no/such/dir/x.csv'), ['a']))).detail).toBe('no such file');
  });
});
