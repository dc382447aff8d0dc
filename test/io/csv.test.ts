import { describe, expect, it } from 'vitest';
import { openCsvTable, sniffSeparator } from '../../src/io/csv.js';
import { CsvTokenizer } from '../../src/io/csv-tokenizer.js';
import { readTable, selectColumns } from '../../src/io/index.js';
import { captureDataError, seededRandom, tempFolder } from './helpers.js';

const file = tempFolder();

function tokenize(text: string, pieceSize = text.length || 1): { cells: string[]; line: number }[] {
  const t = new CsvTokenizer('t.csv');
  const out = [];
  for (let i = 0; i < text.length; i += pieceSize) out.push(...t.push(text.slice(i, i + pieceSize)));
  out.push(...t.end());
  return out;
}

describe('CSV records (RFC 4180 section 2)', () => {
  // Every case is also fed one character at a time, so state carried across pieces is checked.
  const cases: [string, string, string[][]][] = [
    [
      'rule 1: CRLF line ends',
      'aaa,bbb,ccc\r\nzzz,yyy,xxx\r\n',
      [
        ['aaa', 'bbb', 'ccc'],
        ['zzz', 'yyy', 'xxx'],
      ],
    ],
    [
      'rule 2: last record without a line break',
      'aaa,bbb,ccc\r\nzzz,yyy,xxx',
      [
        ['aaa', 'bbb', 'ccc'],
        ['zzz', 'yyy', 'xxx'],
      ],
    ],
    ['rule 5: quoted fields', '"aaa","bbb","ccc"\r\n', [['aaa', 'bbb', 'ccc']]],
    [
      'rule 6: line break and comma inside quotes',
      '"aaa","b\r\nbb","c,cc"\r\nzzz,yyy,xxx',
      [
        ['aaa', 'b\r\nbb', 'c,cc'],
        ['zzz', 'yyy', 'xxx'],
      ],
    ],
    ['rule 7: doubled quote', '"aaa","b""bb","ccc"', [['aaa', 'b"bb', 'ccc']]],
    [
      'LF line ends (common practice)',
      'a,b\n1,2\n',
      [
        ['a', 'b'],
        ['1', '2'],
      ],
    ],
    [
      'empty fields',
      ',\n"",x\n',
      [
        ['', ''],
        ['', 'x'],
      ],
    ],
    ['trailing comma opens an empty last field', 'a,b,', [['a', 'b', '']]],
    ['blank lines skipped (common practice)', 'a\n\n\r\nb\n', [['a'], ['b']]],
    ['a lone quoted empty cell is a record', '""\n', [['']]],
    ['UTF-8 BOM stripped (Unicode FAQ)', '\uFEFFa,b\n', [['a', 'b']]],
    ['doubled quote only', '""""', [['"']]],
  ];
  it.each(cases)('%s', (_name, text, expected) => {
    expect(tokenize(text).map((r) => r.cells)).toEqual(expected);
    expect(tokenize(text, 1).map((r) => r.cells)).toEqual(expected);
  });

  it('reports the line where each record starts, counting line breaks inside quotes', () => {
    const records = tokenize('a\r\n"x\r\ny\nz"\r\nb\rc\n', 1);
    expect(records.map((r) => [r.cells[0], r.line])).toEqual([
      ['a', 1],
      ['x\r\ny\nz', 2],
      ['b', 5],
      ['c', 6],
    ]);
  });

  it('refuses an unclosed quote, naming where the quoted cell opened', async () => {
    const e = await captureDataError(() => tokenize('a,b\n1,"2\n3\n'));
    expect([e.line, e.column]).toEqual([2, 2]);
    expect(e.detail).toMatch(/never closed/);
  });

  it('refuses text after a closing quote and a quote inside an unquoted cell (RFC 4180 rules 5-7)', async () => {
    const after = await captureDataError(() => tokenize('a,"b"c\n'));
    expect([after.line, after.column]).toEqual([1, 2]);
    const inside = await captureDataError(() => tokenize('a\nb,c"d\n'));
    expect([inside.line, inside.column]).toEqual([2, 2]);
  });
});

describe('CSV tables', () => {
  it('detects a header when any cell is not a number, and reads the numbers', async () => {
    const t = await readTable(file('h.csv', 'temp,humidity\n21.5,0.4\n-3,1e-3\n'));
    expect(t.columns).toEqual(['temp', 'humidity']);
    expect(Array.from(t.data)).toEqual([21.5, 0.4, -3, 0.001]);
    const n = await readTable(file('n.csv', '1,2\n3,4'));
    expect(n.columns).toBeNull();
    expect([n.rows, n.width]).toEqual([2, 2]);
  });

  it('reads BOM + CRLF + quoted numbers the same as plain LF', async () => {
    const plain = await readTable(file('p.csv', 'a,b\n1,2\n3,4\n'));
    const fancy = await readTable(file('f.csv', '\uFEFF"a",b\r\n"1", 2\r\n3,"4"'));
    expect(fancy).toEqual(plain);
  });

  // ECMAScript Number(): these strings are plain decimals it converts.
  it.each([
    ['1e3', 1000],
    ['-.5', -0.5],
    ['+2', 2],
    ['.5', 0.5],
    [' 7 ', 7],
    ['1E-3', 0.001],
    ['-0.5', -0.5],
    ['5.', 5],
  ])('accepts %j as %d (ECMAScript Number())', async (cell, value) => {
    const t = await readTable(file('ok.csv', `x\n"${cell}"\n`));
    expect(t.data[0]).toBe(value);
  });

  it.each([
    ['NaN', 'is not a number'],
    ['Infinity', 'is not a number'],
    ['-Infinity', 'is not a number'],
    ['0x10', 'is not a number'],
    ['1,5', 'is not a number'],
    ['', 'is empty'],
    ['   ', 'is empty'],
    ['1e999', 'is out of the float64 range'],
    ['0b11', 'is not a number'],
    ['1_000', 'is not a number'],
  ])('refuses %j with its line, column and column name', async (cell, why) => {
    const path = file('bad.csv', `temp,humidity,wind\n1,2,3\n4,"${cell}",6\n`);
    const e = await captureDataError(() => readTable(path));
    expect([e.file, e.line, e.column]).toEqual([path, 3, 2]);
    expect(e.detail).toBe(`cell ${JSON.stringify(cell)} in column "humidity" ${why}`);
    expect(e.message).toBe(`${path}:3:2: ${e.detail}`);
  });

  it('names the column by position when there is no header', async () => {
    const path = file('nohead.csv', '1,2,3\n4,5,abc\n');
    // "abc" on line 2 makes no difference to detection: only the first row is looked at.
    const e = await captureDataError(() => readTable(path));
    expect(e.message).toBe(`${path}:2:3: cell "abc" in column 3 is not a number`);
  });

  it('refuses a ragged row naming expected and actual counts', async () => {
    const short = file('short.csv', 'a,b,c\n1,2,3\n4,5\n');
    const e = await captureDataError(() => readTable(short));
    expect([e.line, e.column]).toEqual([3, 3]);
    expect(e.detail).toBe('row has 2 cells, expected 3 (the header has 3)');
    const long = file('long.csv', '1,2\n3,4,5\n');
    const f = await captureDataError(() => readTable(long));
    expect([f.line, f.column]).toEqual([2, 3]);
    expect(f.detail).toBe('row has 3 cells, expected 2 (the first row has 2)');
  });

  it('refuses an empty file and a header-only file', async () => {
    for (const text of ['', '\uFEFF', '\n\r\n']) {
      const e = await captureDataError(() => openCsvTable(file('empty.csv', text)));
      expect(e.detail).toBe('file is empty');
    }
    const h = await captureDataError(() => openCsvTable(file('head.csv', 'a,b\n')));
    expect(h.detail).toMatch(/^no data rows/);
  });

  it('refuses repeated and empty header names', async () => {
    const e = await captureDataError(() => openCsvTable(file('dup.csv', 'a,b,a\n1,2,3\n')));
    expect([e.line, e.column, e.detail]).toEqual([1, 3, 'column name "a" repeats column 1']);
  });

  it('refuses a missing file as a DataError, not a stack trace', async () => {
    const e = await captureDataError(() => openCsvTable(file('nope.csv')));
    expect(e.detail).toBe('no such file');
  });

  it('matches columns in a different order by name (selectColumns)', async () => {
    const t = await readTable(file('order.csv', 'c,a,b\n3,1,2\n30,10,20\n'));
    const picked = selectColumns(t, ['a', 'b', 'c'], 'order.csv');
    expect(picked.columns).toEqual(['a', 'b', 'c']);
    expect(Array.from(picked.data)).toEqual([1, 2, 3, 10, 20, 30]);
    const e = await captureDataError(() => selectColumns(t, ['a', 'z'], 'order.csv'));
    expect(e.detail).toBe('no column named "z"; available: "c", "a", "b"');
  });

  it('keeps a text column as strings for class labels', async () => {
    const t = await readTable(file('labels.csv', 'x,quality\n0.5,good\n0.25,"bad, very"\n'), { textColumns: ['quality'] });
    expect(t.text.get(1)).toEqual(['good', 'bad, very']);
    expect(t.data[0]).toBe(0.5);
    expect(t.data[2]).toBe(0.25);
    expect(Number.isNaN(t.data[1])).toBe(true);
    const e = await captureDataError(() => readTable(file('lab2.csv', 'x,quality\n1,good\n2,\n'), { textColumns: ['quality'] }));
    expect([e.line, e.column]).toEqual([3, 2]);
  });

  it('text columns given by position do not trigger header detection', async () => {
    const t = await readTable(file('pos.csv', '0.5,good\n1.5,bad\n'), { textColumns: [1] });
    expect(t.columns).toBeNull();
    expect(t.rows).toBe(2);
    expect(t.text.get(1)).toEqual(['good', 'bad']);
  });

  it('reads a single 10 MB line (a wide row) exactly', async () => {
    const rand = seededRandom(7);
    const width = 1_200_000;
    const cells = Array.from({ length: width }, () => rand().toFixed(6));
    const values = cells.map(Number);
    const line = cells.join(',');
    expect(line.length).toBeGreaterThan(10_000_000);
    const t = await readTable(file('wide.csv', line + '\n' + line));
    expect([t.rows, t.width]).toEqual([2, width]);
    expect(t.data[0]).toBe(values[0]);
    expect(t.data[width - 1]).toBe(values[width - 1]);
    expect(t.data[width + 12345]).toBe(values[12345]);
    let sum = 0;
    for (let i = 0; i < width; i++) sum += t.data[width + i] - values[i];
    expect(sum).toBe(0);
  });

  it('reads 200 000 rows in chunks of the asked size without reading the whole file first', async () => {
    const rows = 200_000;
    const lines = ['id,twice,half'];
    for (let i = 0; i < rows; i++) lines.push(`${i},${2 * i},${i / 2}`);
    const path = file('big.csv', lines.join('\n') + '\n');
    const table = await openCsvTable(path, { chunkRows: 5000 });
    const sizes: number[] = [];
    let readWhenFirstChunk = -1;
    let expectedId = 0;
    const firstLines: number[] = [];
    for await (const chunk of table.chunks()) {
      if (readWhenFirstChunk < 0) readWhenFirstChunk = table.bytesRead;
      sizes.push(chunk.rows);
      firstLines.push(chunk.firstLine);
      for (let r = 0; r < chunk.rows; r++, expectedId++) {
        if (chunk.data[r * 3] !== expectedId || chunk.data[r * 3 + 1] !== 2 * expectedId || chunk.data[r * 3 + 2] !== expectedId / 2) {
          throw new Error(`row ${expectedId} read wrong`);
        }
      }
    }
    expect(expectedId).toBe(rows);
    expect(sizes).toEqual(new Array(40).fill(5000));
    expect(firstLines.slice(0, 3)).toEqual([2, 5002, 10002]);
    expect(readWhenFirstChunk).toBeGreaterThan(0);
    expect(readWhenFirstChunk).toBeLessThan(table.bytesTotal / 10);
  });

  it('stops reading when closed mid-way', async () => {
    const path = file('stop.csv', 'a\n' + Array.from({ length: 50_000 }, (_, i) => String(i)).join('\n'));
    const table = await openCsvTable(path, { chunkRows: 100 });
    let seen = 0;
    for await (const chunk of table.chunks()) {
      seen += chunk.rows;
      if (seen >= 300) break;
    }
    await table.close();
    expect(seen).toBe(300);
    expect(table.bytesRead).toBeLessThan(table.bytesTotal);
  });
});

describe('CSV separators, unnamed and skipped columns', () => {
  it.each([
    ['a,b;c\n', ','],
    ['a;b;c\n1,5;2;3\n', ';'],
    ['a\tb\tc\n', '\t'],
    ['"x;y"\t"z,w"\n', '\t'],
    ['single\n', ','],
  ])('sniffs %j as %j (comma, else semicolon, else tab, from the first line outside quotes)', (text, sep) => {
    expect(sniffSeparator(text)).toBe(sep);
  });

  it('reads a semicolon file with quoted cells the same as the comma file', async () => {
    const comma = await readTable(file('c.csv', 'a,b,note\n1,2,"x, y"\n3,4,z\n'), { textColumns: ['note'] });
    const semi = await readTable(file('s.csv', 'a;b;note\n1;2;"x; y"\n3;4;z\n'), { textColumns: ['note'] });
    expect(Array.from(semi.data)).toEqual(Array.from(comma.data));
    expect(semi.text.get(2)).toEqual(['x; y', 'z']);
  });

  it('reads a .tsv file with tabs even when the header holds a comma', async () => {
    const t = await readTable(file('t.tsv', 'a, b\tc\n1\t2\n'));
    expect([t.columns, Array.from(t.data)]).toEqual([
      ['a, b', 'c'],
      [1, 2],
    ]);
  });

  it('never parses skipped columns nor unnamed ones: blanks and words there are fine, NaN in their slots', async () => {
    const t = await readTable(file('k.csv', ',a,label,b,\n0,1,,2,\nrow,3,good,4,\n'), { skipColumns: ['label'] });
    expect(t.columns).toEqual(['', 'a', 'label', 'b', '']);
    expect(Array.from(t.data).map((v) => (Number.isNaN(v) ? null : v))).toEqual([null, 1, null, 2, null, null, 3, null, 4, null]);
  });

  it('refuses 1e39 at the cell (past float32, IEEE 754 binary32) but reads 3.4e38', async () => {
    const e = await captureDataError(() => readTable(file('o.csv', 'a,b\n3.4e38,1\n-1e39,2\n')));
    expect([e.line, e.column]).toEqual([3, 1]);
    expect(e.detail).toBe('cell "-1e39" in column "a" is out of the float32 range (largest finite: 3.4028235e38)');
  });
});
