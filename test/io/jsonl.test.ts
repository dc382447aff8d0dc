import { describe, expect, it } from 'vitest';
import { openTable, readTable } from '../../src/io/index.js';
import { captureDataError, tempFolder } from './helpers.js';

const file = tempFolder();

describe('JSONL tables (one JSON value per line, RFC 8259 values)', () => {
  it('reads arrays of numbers; no column names', async () => {
    const t = await readTable(file('a.jsonl', '[1, 2.5]\n[-3e2, 0.125]\n'));
    expect([t.columns, t.rows, t.width]).toEqual([null, 2, 2]);
    expect(Array.from(t.data)).toEqual([1, 2.5, -300, 0.125]);
  });

  it('reads objects keyed by column name, keys in any order, blank lines skipped, CRLF and BOM', async () => {
    const t = await readTable(file('o.jsonl', '\uFEFF{"temp": 21.5, "wind": 3}\r\n\r\n   \n{"wind": 4, "temp": -1}'));
    expect(t.columns).toEqual(['temp', 'wind']);
    expect(Array.from(t.data)).toEqual([21.5, 3, -1, 4]);
  });

  it('reports a bad JSON line with its line number and the parser position as column', async () => {
    const path = file('bad.jsonl', '[1, 2]\n\n[3, 4\n[5, 6]\n');
    const e = await captureDataError(() => readTable(path));
    expect([e.file, e.line]).toEqual([path, 3]);
    // V8 reports the 0-based offset where "]" or "," was expected: the end of "[3, 4" (offset 5).
    expect(e.column).toBe(6);
    expect(e.message).toMatch(new RegExp(`^${path}:3:6: not valid JSON`));
  });

  it('refuses a first line that is not valid JSON at open time', async () => {
    const e = await captureDataError(() => openTable(file('first.jsonl', 'temp,wind\n[1,2]\n')));
    expect(e.line).toBe(1);
    expect(e.detail).toMatch(/^not valid JSON/);
  });

  it.each([
    ['[1, 2]\n{"a": 1, "b": 2}\n', 2, 1, /expected an array like the first line/],
    ['[1, 2]\n[1, 2, 3]\n', 2, 3, /row has 3 values, expected 2/],
    ['[1, 2]\n[1, "2"]\n', 2, 2, /value "2" in column 2 is not a finite number/],
    ['[1, 2]\n[1, null]\n', 2, 2, /value null in column 2 is not a finite number/],
    ['[1, 2]\n[1, 1e999]\n', 2, 2, /is not a finite number/],
    ['{"a": 1, "b": 2}\n{"a": 1}\n', 2, 2, /key "b" is missing/],
    ['{"a": 1}\n\n{"a": true}\n', 3, 1, /value true in column "a" is not a finite number/],
    ['"just a string"\n', 1, 1, /each line must be an array of numbers or an object/],
  ])('refuses %j at line %i column %i', async (text, line, column, why) => {
    const e = await captureDataError(() => readTable(file('r.jsonl', text)));
    expect([e.line, e.column]).toEqual([line, column]);
    expect(e.detail).toMatch(why);
  });

  it('refuses an empty file', async () => {
    const e = await captureDataError(() => openTable(file('e.jsonl', '\n\n')));
    expect(e.detail).toBe('file is empty');
  });

  it('keeps a text column from objects as strings', async () => {
    const t = await readTable(file('t.jsonl', '{"x": 1, "quality": "good"}\n{"x": 2, "quality": "bad"}\n'), { textColumns: ['quality'] });
    expect(t.text.get(1)).toEqual(['good', 'bad']);
    expect([t.data[0], t.data[2]]).toEqual([1, 2]);
  });

  it('chunks a long file by the asked row count', async () => {
    const lines = Array.from({ length: 1000 }, (_, i) => JSON.stringify({ i, sq: i * i }));
    const table = await openTable(file('long.jsonl', lines.join('\n')), { chunkRows: 300 });
    const sizes: number[] = [];
    const firstLines: number[] = [];
    let last = -1;
    for await (const c of table.chunks()) {
      sizes.push(c.rows);
      firstLines.push(c.firstLine);
      last = c.data[(c.rows - 1) * 2 + 1];
    }
    expect(sizes).toEqual([300, 300, 300, 100]);
    expect(firstLines).toEqual([1, 301, 601, 901]);
    expect(last).toBe(999 * 999);
  });
});

describe('JSONL keys that are not read', () => {
  it('reads class cells given as numbers as their text, and skips a column whose key comes and goes', async () => {
    const t = await readTable(file('k.jsonl', '{"x": 1, "y": 2, "note": "a"}\n{"x": 3, "y": 1.0}\n{"x": 5, "y": 0, "note": {"deep": [1]}, "id": 9}\n'), {
      textColumns: ['y'],
      skipColumns: ['note'],
    });
    expect(t.text.get(1)).toEqual(['2', '1', '0']);
    expect(Array.from(t.data).map((v) => (Number.isNaN(v) ? null : v))).toEqual([1, null, null, 3, null, null, 5, null, null]);
  });
});
