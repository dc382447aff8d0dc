import { describe, expect, it } from 'vitest';
import { openTable, readTable, resolveColumns, selectColumns } from '../../src/io/index.js';
import { captureDataError, FIXTURES, tempFolder } from './helpers.js';

const file = tempFolder();

describe('openTable / readTable', () => {
  it('follows the extension, case-insensitively, or the format given', async () => {
    const csv = await readTable(file('x.CSV', 'a\n1\n'));
    expect(csv.columns).toEqual(['a']);
    const asJsonl = await readTable(file('rows.txt', '[1,2]\n'), { format: 'jsonl' });
    expect(Array.from(asJsonl.data)).toEqual([1, 2]);
    const npy = await readTable(FIXTURES + 'f8-2d.npy');
    expect([npy.rows, npy.width]).toEqual([2, 3]);
  });

  it('refuses an unknown extension naming the supported ones', async () => {
    const e = await captureDataError(() => openTable(file('x.xlsx', 'a')));
    expect(e.detail).toBe('unknown data file extension ".xlsx"; supported: .csv, .tsv, .jsonl, .npy (rename the file to one of these)');
  });

  it('the same rows read the same from CSV, JSONL and NPY (common practice: one table, three spellings)', async () => {
    const csv = await readTable(file('s.csv', '0,0.25,-1.5\n2,3,4\n'));
    const jsonl = await readTable(file('s.jsonl', '[0,0.25,-1.5]\n[2,3,4]\n'));
    expect(jsonl.data).toEqual(csv.data);
    expect([jsonl.rows, jsonl.width]).toEqual([csv.rows, csv.width]);
  });

  it('NPY text columns hand out each number as its text (class indices by position)', async () => {
    // f8-2d.npy holds i * 0.1 for i = 0..5, shape (2, 3) (make-npy.py).
    const t = await readTable(FIXTURES + 'f8-2d.npy', { textColumns: [0] });
    expect(t.text.get(0)).toEqual(['0', String(3 * 0.1)]);
    expect(Number.isNaN(t.data[0])).toBe(true);
    expect(t.data[1]).toBe(0.1);
  });

  it('reads NPY in chunks of the asked size', async () => {
    const t = await openTable(FIXTURES + 'f8-v2.npy', { chunkRows: 3 });
    const got: [number, number, number[]][] = [];
    for await (const c of t.chunks()) got.push([c.rows, c.firstLine, Array.from(c.data)]);
    expect(got).toEqual([
      [3, 1, [0, 0.25, 0.5, 0.75, 1, 1.25]],
      [1, 4, [1.5, 1.75]],
    ]);
  });
});

describe('column selection', () => {
  const table = { columns: ['id', 'temp', 'humidity'], rows: 2, width: 3, data: new Float64Array([1, 20, 0.5, 2, 21, 0.6]), text: new Map<number, string[]>() };

  it('maps names and positions to positions', () => {
    expect(resolveColumns(table.columns, 3, ['humidity', 0], 'd.csv')).toEqual([2, 0]);
  });

  it('gathers the picked columns in the asked order', () => {
    const picked = selectColumns(table, ['humidity', 'temp'], 'd.csv');
    expect(picked.indices).toEqual([2, 1]);
    expect(Array.from(picked.data)).toEqual([0.5, 20, 0.6, 21]);
  });

  it('refuses unknown names (listing what exists), names without a header, positions out of range', async () => {
    const unknown = await captureDataError(() => selectColumns(table, ['pressure'], 'd.csv'));
    expect(unknown.message).toBe('d.csv:1: no column named "pressure"; available: "id", "temp", "humidity"');
    const noHeader = await captureDataError(() => resolveColumns(null, 3, ['temp'], 'n.csv'));
    expect(noHeader.detail).toMatch(/no header row/);
    const range = await captureDataError(() => resolveColumns(null, 3, [3], 'n.csv'));
    expect(range.detail).toMatch(/position 3 is out of range: the table has 3 columns/);
  });
});
