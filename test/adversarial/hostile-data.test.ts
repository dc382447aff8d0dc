/**
 * Hostile data files through the CLI (`tendon score` and `tendon tune`, in-process through the
 * same `main` the executable calls). Each file either gets the one-line error
 * `tendon: FILE[:LINE[:COLUMN]]: what` and exit 2, or is read correctly, checked by number.
 *
 * The scoring model is a single linear dense layer with inline weights, so every expected
 * output follows from the definition y = x·W + b (common practice): W = [1, 10, 100], b = 0.5,
 * i.e. y = a + 10 b + 100 c + 0.5. All inputs are small integers or halves, exact in binary32
 * (IEEE 754-2008), so outputs are compared exactly.
 */
import { mkdtemp, readFile, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readModelFile } from '../../src/format/index.js';
import { runCli } from '../cli/run-cli.js';

let dir: string;
let model: string;
let classifierSpec: string;

/** y = a + 10 b + 100 c + 0.5 (the dense layer's definition with the weights in the spec). */
const expected = ([a, b, c]: number[]) => a + 10 * b + 100 * c + 0.5;

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-hostile-'));
  await writeFile(
    join(dir, 'linear.json'),
    JSON.stringify({
      inputs: 3,
      features: ['a', 'b', 'c'],
      labels: ['y'],
      layers: [{ kind: 'dense', size: 1, activation: 'linear', weight: [[1], [10], [100]], bias: [0.5] }],
    }),
  );
  model = join(dir, 'linear.tendon');
  const packed = await runCli('pack', join(dir, 'linear.json'), '-o', model);
  expect(packed.code).toBe(0);
  classifierSpec = join(dir, 'classifier.json');
  await writeFile(
    classifierSpec,
    JSON.stringify({
      inputs: 2,
      features: ['a', 'b'],
      labels: ['no', 'yes'],
      normalise: { method: 'zscore' },
      layers: [{ kind: 'dense', size: 2, activation: 'softmax' }],
    }),
  );
});

let counter = 0;
async function dataFile(content: string | Buffer, ext = 'csv'): Promise<string> {
  const path = join(dir, `data-${counter++}.${ext}`);
  await writeFile(path, content);
  return path;
}

const escape = (text: string) => text.replace(/[.*+?^${}()|[\]\\]/g, '\\$&');

/** stderr is exactly one line: "tendon: PATH<where>: <detail matching `detail`>". */
function expectOneLineError(err: string, path: string, where: string, detail: RegExp): void {
  expect(err.endsWith('\n')).toBe(true);
  expect(err.trimEnd()).not.toContain('\n');
  // A message that echoes a 10 MB cell is one line but useless: keep it short.
  expect(err.length).toBeLessThan(600);
  expect(err).toMatch(new RegExp(`^tendon: ${escape(path)}${escape(where)}: `));
  expect(err).toMatch(detail);
}

type Outcome = { rows: number[][] } | { where: string; error: RegExp };

const TEN_MB = 10 * 1024 * 1024;

// [name, file content, what must happen]. `where` is ":line:column", ":line" or "" (no place).
const CSV_CASES: [string, () => string, Outcome][] = [
  ['empty file', () => '', { where: '', error: /file is empty/ }],
  ['only blank lines (LF and CRLF)', () => '\n\r\n\n', { where: '', error: /file is empty/ }],
  ['header only', () => 'a,b,c\n', { where: ':1', error: /no data rows/ }],
  ['header only, no final newline', () => 'a,b,c', { where: ':1', error: /no data rows/ }],
  ['ragged row, a cell short', () => 'a,b,c\n1,2,3\n4,5\n', { where: ':3:3', error: /row has 2 cells, expected 3/ }],
  ['ragged row, a cell extra', () => 'a,b,c\n1,2,3,4\n', { where: ':2:4', error: /row has 4 cells, expected 3/ }],
  ['a trailing comma is one more (empty) cell', () => 'a,b,c\n1,2,3,\n', { where: ':2:4', error: /row has 4 cells/ }],
  [
    'ragged row after a quoted cell spanning two lines (line numbers follow the file)',
    () => 'a,b,c\n"1\n",2,3\n4,5\n',
    { where: ':4:3', error: /row has 2 cells/ },
  ],
  ['quoted fields (RFC 4180)', () => '"a","b","c"\n"1","2","3"\n', { rows: [[1, 2, 3]] }],
  ['quoted decimal comma is one cell and not a number', () => 'a,b,c\n"1,5",2,3\n', { where: ':2:1', error: /cell "1,5" in column "a" is not a number/ }],
  ['a quote inside an unquoted cell', () => 'a,b,c\n1,2"3,4\n', { where: ':2:2', error: /quote inside an unquoted cell/ }],
  ['a quoted cell never closed', () => 'a,b,c\n1,"2,3\n4,5,6\n', { where: ':2:2', error: /never closed/ }],
  ['UTF-8 byte-order mark before the header', () => '\uFEFFa,b,c\n1,2,3\n', { rows: [[1, 2, 3]] }],
  [
    'UTF-8 byte-order mark, no header',
    () => '\uFEFF1,2,3\n0.5,0,1\n',
    {
      rows: [
        [1, 2, 3],
        [0.5, 0, 1],
      ],
    },
  ],
  [
    'CRLF line ends',
    () => 'a,b,c\r\n1,2,3\r\n4,5,6\r\n',
    {
      rows: [
        [1, 2, 3],
        [4, 5, 6],
      ],
    },
  ],
  ['CRLF line ends: an error on line 3 says line 3', () => 'a,b,c\r\n1,2,3\r\n4,x,6\r\n', { where: ':3:2', error: /cell "x" in column "b" is not a number/ }],
  [
    'lone CR line ends, no final newline',
    () => 'a,b,c\r1,2,3\r4,5,6',
    {
      rows: [
        [1, 2, 3],
        [4, 5, 6],
      ],
    },
  ],
  [
    'blank lines between rows are skipped',
    () => 'a,b,c\n\n1,2,3\n\n\n4,5,6\n',
    {
      rows: [
        [1, 2, 3],
        [4, 5, 6],
      ],
    },
  ],
  ['NaN cell', () => 'a,b,c\n1,NaN,3\n', { where: ':2:2', error: /cell "NaN" in column "b" is not a number/ }],
  ['nan cell', () => 'a,b,c\n1,2,nan\n', { where: ':2:3', error: /cell "nan" in column "c" is not a number/ }],
  ['Infinity cell', () => 'a,b,c\nInfinity,2,3\n', { where: ':2:1', error: /"Infinity" in column "a" is not a number/ }],
  ['-Infinity cell', () => 'a,b,c\n1,-Infinity,3\n', { where: ':2:2', error: /is not a number/ }],
  ['inf cell', () => 'a,b,c\n1,2,inf\n', { where: ':2:3', error: /is not a number/ }],
  ['empty cell', () => 'a,b,c\n1,,3\n', { where: ':2:2', error: /cell "" in column "b" is empty/ }],
  ['blank (spaces only) cell', () => 'a,b,c\n1,2,   \n', { where: ':2:3', error: /is empty/ }],
  ['a number beyond float64 (1e999)', () => 'a,b,c\n1e999,2,3\n', { where: ':2:1', error: /out of the float64 range/ }],
  [
    'exotic but plain decimals: +1.5, .5, 5., 1e2, 1E-2, -0, padded',
    () => 'a,b,c\n+1.5,.5,5.\n1e2,1E-2,-0\n 2 ,\t3\t,  4\n',
    {
      rows: [
        [1.5, 0.5, 5],
        [100, 0.01, -0],
        [2, 3, 4],
      ],
    },
  ],
  ['hexadecimal', () => 'a,b,c\n0x10,2,3\n', { where: ':2:1', error: /"0x10" in column "a" is not a number/ }],
  ['binary literal', () => 'a,b,c\n1,0b1,3\n', { where: ':2:2', error: /is not a number/ }],
  ['digit separators', () => 'a,b,c\n1_000,2,3\n', { where: ':2:1', error: /is not a number/ }],
  ['full-width digits', () => 'a,b,c\n1,２,3\n', { where: ':2:2', error: /is not a number/ }],
  ['Arabic-Indic digits', () => 'a,b,c\n1,2,٣\n', { where: ':2:3', error: /is not a number/ }],
  ['two decimal points', () => 'a,b,c\n1.2.3,2,3\n', { where: ':2:1', error: /is not a number/ }],
  ['double sign', () => 'a,b,c\n--1,2,3\n', { where: ':2:1', error: /is not a number/ }],
  ['exponent without digits', () => 'a,b,c\n1e,2,3\n', { where: ':2:1', error: /is not a number/ }],
  ['a lone point', () => 'a,b,c\n.,2,3\n', { where: ':2:1', error: /is not a number/ }],
  ['a space inside a number', () => 'a,b,c\n1 2,2,3\n', { where: ':2:1', error: /is not a number/ }],
  [
    'columns in a different order are matched by name',
    () => 'c,a,b\n3,1,2\n0,0.5,1\n',
    {
      rows: [
        [1, 2, 3],
        [0.5, 1, 0],
      ],
    },
  ],
  ['extra columns are ignored when every feature is named', () => 'z,c,a,b\n9,3,1,2\n', { rows: [[1, 2, 3]] }],
  [
    'a header naming some features but missing one is refused, not read by position',
    () => 'b,a,d\n1,2,3\n',
    { where: ':1', error: /missing feature column "c"/ },
  ],
  ['a repeated column name', () => 'a,b,a\n1,2,3\n', { where: ':1:3', error: /column name "a" repeats column 1/ }],
  ['an empty column name where a feature should be: that feature is missing', () => 'a,,c\n1,2,3\n', { where: ':1', error: /missing feature column "b"/ }],
  [
    'a dataframe index column (empty name) first is never read',
    () => ',a,b,c\n0,1,2,3\nrow-1,0.5,1,0\n',
    {
      rows: [
        [1, 2, 3],
        [0.5, 1, 0],
      ],
    },
  ],
  ['a comma ending every line (an empty-named, empty last column)', () => 'a,b,c,\n1,2,3,\n', { rows: [[1, 2, 3]] }],
  [
    'an empty cell in a column the model does not read',
    () => 'a,b,c,label\n1,2,3,\n0.5,1,0,good\n',
    {
      rows: [
        [1, 2, 3],
        [0.5, 1, 0],
      ],
    },
  ],
  [
    'a number beyond float32 (1e39), refused at the cell',
    () => 'a,b,c\n1,2,3\n1,1e39,3\n',
    { where: ':3:2', error: /cell "1e39" in column "b" is out of the float32 range/ },
  ],
  ['semicolon-separated (sniffed from the header)', () => 'a;b;c\n1;2;3\n', { rows: [[1, 2, 3]] }],
  ['semicolon-separated with decimal commas is refused with a hint', () => 'a;b;c\n1,5;2;3\n', { where: ':2:1', error: /decimal comma/ }],
  [
    'a 10 MB cell that is not a float64 (a single 10 MB line)',
    () => `a,b,c\n${'9'.repeat(TEN_MB)},1,1\n`,
    { where: ':2:1', error: /in column "a" is out of the float64 range/ },
  ],
  ['a 10 MB line of letters', () => `a,b,c\n1,${'x'.repeat(TEN_MB)},1\n`, { where: ':2:2', error: /in column "b" is not a number/ }],
  ['a 10 MB line of 5 million cells', () => `a,b,c\n${'1,'.repeat(TEN_MB / 2 - 1)}1\n`, { where: ':2:4', error: /row has 5242880 cells, expected 3/ }],
  ['a 10 MB cell that is a valid number (1.000...0, 10 MB of zeros)', () => `a,b,c\n1.${'0'.repeat(TEN_MB)},2,3\n`, { rows: [[1, 2, 3]] }],
];

const JSONL_CASES: [string, () => string, Outcome][] = [
  ['empty file', () => '', { where: '', error: /file is empty/ }],
  [
    'objects with keys in a different order on each line',
    () => '{"a":1,"b":2,"c":3}\n{"c":0,"b":1,"a":0.5}\n',
    {
      rows: [
        [1, 2, 3],
        [0.5, 1, 0],
      ],
    },
  ],
  [
    'UTF-8 byte-order mark and CRLF line ends',
    () => '\uFEFF{"a":1,"b":2,"c":3}\r\n[4,5,6]\r\n'.replace('[4,5,6]', '{"a":4,"b":5,"c":6}'),
    {
      rows: [
        [1, 2, 3],
        [4, 5, 6],
      ],
    },
  ],
  ['NaN is not JSON (the column points at the N)', () => '{"a":1,"b":2,"c":3}\n{"a":1,"b":NaN,"c":3}\n', { where: ':2:12', error: /not valid JSON/ }],
  ['a number beyond float64 parses to Infinity and is refused', () => '{"a":1e999,"b":2,"c":3}\n', { where: ':1:1', error: /not a finite number/ }],
  ['a number given as a string', () => '{"a":1,"b":"2","c":3}\n', { where: ':1:2', error: /value "2" in column "b" is not a finite number/ }],
  ['null', () => '{"a":1,"b":2,"c":null}\n', { where: ':1:3', error: /value null in column "c" is not a finite number/ }],
  ['a missing key', () => '{"a":1,"b":2,"c":3}\n{"a":1,"c":3}\n', { where: ':2:2', error: /key "b" is missing/ }],
  [
    'extra keys of any type are ignored',
    () => '{"id":7,"a":1,"b":2,"c":3,"meta":{"x":[1]},"ok":true,"note":null}\n{"a":4,"b":5,"c":6,"id":8,"ok":false,"meta":null,"note":"n"}\n',
    {
      rows: [
        [1, 2, 3],
        [4, 5, 6],
      ],
    },
  ],
  [
    'an unused key present on some lines only is ignored',
    () => '{"a":1,"b":2,"c":3,"note":"x"}\n{"a":4,"b":5,"c":6}\n{"a":7,"b":8,"c":9,"extra":1}\n',
    {
      rows: [
        [1, 2, 3],
        [4, 5, 6],
        [7, 8, 9],
      ],
    },
  ],
  [
    'a number beyond float32 (1e39), refused at the value',
    () => '{"a":1,"b":2,"c":1e39}\n',
    { where: ':1:3', error: /value 1e\+39 in column "c" is out of the float32 range/ },
  ],
  ['a ragged array row', () => '[1,2,3]\n[1,2]\n', { where: ':2:3', error: /row has 2 values, expected 3/ }],
  [
    'a 10 MB string value (a single 10 MB line)',
    () => `{"a":1,"b":"${'x'.repeat(TEN_MB)}","c":3}\n`,
    { where: ':1:2', error: /in column "b" is not a finite number/ },
  ],
];

async function scoreFile(path: string): Promise<{ code: number; err: string; out: string; scores: number[] }> {
  const output = join(dir, `scores-${counter++}.csv`);
  const r = await runCli('score', model, '--input', path, '--output', output, '--engine', 'js');
  if (r.code !== 0) return { ...r, scores: [] };
  const lines = (await readFile(output, 'utf8')).trim().split('\n');
  expect(lines[0]).toBe('y');
  return { ...r, scores: lines.slice(1).map(Number) };
}

async function expectOutcome(path: string, outcome: Outcome): Promise<void> {
  const r = await scoreFile(path);
  if ('rows' in outcome) {
    expect(r.err).toMatch(/^scored \d+ rows/);
    expect(r.code).toBe(0);
    expect(r.scores).toEqual(outcome.rows.map(expected));
  } else {
    expect(r.code).toBe(2);
    expectOneLineError(r.err, path, outcome.where, outcome.error);
  }
}

describe('tendon score on hostile CSV files', () => {
  it.each(CSV_CASES)('%s', async (_name, content, outcome) => {
    const path = await dataFile(content());
    const started = performance.now();
    await expectOutcome(path, outcome);
    // Even the 10 MB lines are refused or read in seconds, not minutes.
    expect(performance.now() - started).toBeLessThan(20_000);
  });
});

describe('tendon score on hostile JSONL files', () => {
  it.each(JSONL_CASES)('%s', async (_name, content, outcome) => {
    await expectOutcome(await dataFile(content(), 'jsonl'), outcome);
  });
});

/** Column means by the two-pass definition, for checking the z-score statistics tune fits. */
function means(rows: number[][]): number[] {
  return rows[0].map((_, k) => rows.reduce((s, r) => s + r[k], 0) / rows.length);
}

type TuneOutcome = { features: number[][] } | { where: string; error: RegExp };

const TUNE_CASES: [string, () => string, TuneOutcome][] = [
  ['empty file', () => '', { where: '', error: /file is empty/ }],
  ['header only', () => 'a,b,label\n', { where: ':1', error: /no data rows/ }],
  ['ragged row', () => 'a,b,label\n1,2,yes\n3,no\n', { where: ':3:3', error: /row has 2 cells, expected 3/ }],
  ['NaN feature', () => 'a,b,label\n1,NaN,yes\n', { where: ':2:2', error: /"NaN" in column "b" is not a number/ }],
  ['Infinity feature', () => 'a,b,label\n1,2,yes\nInfinity,2,no\n', { where: ':3:1', error: /is not a number/ }],
  ['empty target cell', () => 'a,b,label\n1,2,\n', { where: ':2:3', error: /is empty/ }],
  ['an unknown class on line 3', () => 'a,b,label\n1,2,yes\n3,4,maybe\n', { where: ':3:3', error: /class "maybe" is not one the model knows/ }],
  [
    'an unknown class after blank lines: the line named is the file line',
    () => 'a,b,label\n\n1,2,yes\n\n3,4,maybe\n',
    { where: ':5:3', error: /class "maybe"/ },
  ],
  ['an unknown class after a quoted cell spanning lines', () => 'a,b,label\n1,2,"yes"\n3,4,"no\n"\n5,6,maybe\n', { where: ':5:3', error: /class "maybe"/ }],
  ['a 10 MB class label', () => `a,b,label\n1,2,${'z'.repeat(TEN_MB)}\n`, { where: ':2:3', error: /is not one the model knows/ }],
  ['a class index out of range', () => 'a,b,label\n1,2,2\n', { where: ':2:3', error: /class "2"/ }],
  [
    'class indices, including float-looking whole numbers (0.0) as dataframes write them',
    () => 'a,b,label\n1,2,1\n3,4,0.0\n5,6,1.0\n',
    {
      features: [
        [1, 2],
        [3, 4],
        [5, 6],
      ],
    },
  ],
  [
    'a column mixing class names and indices is refused at the first index',
    () => 'a,b,label\n1,2,yes\n3,4,no\n5,6,1\n',
    { where: ':4:3', error: /mixes class names and indices \("yes" on line 2, "1" on line 4\)/ },
  ],
  [
    'BOM, CRLF, quoted labels, columns in another order: read correctly',
    () => '\uFEFFlabel,b,a\r\n"yes",2,1\r\nno,4,3\r\nyes,0.5,-1\r\n" no ",8,7\r\n',
    // Every label cell ("yes", no, yes, " no ") is a class the model knows, or tune would refuse it.
    {
      features: [
        [1, 2],
        [3, 4],
        [-1, 0.5],
        [7, 8],
      ],
    },
  ],
];

describe('tendon tune on hostile training files', () => {
  it.each(TUNE_CASES)('%s', async (_name, content, outcome) => {
    const path = await dataFile(content());
    const out = join(dir, `tuned-${counter++}.tendon`);
    const r = await runCli(
      'tune',
      classifierSpec,
      '--data',
      path,
      '--target',
      'label',
      '-o',
      out,
      '--epochs',
      '1',
      '--batch',
      '2',
      '--engine',
      'js',
      '--log',
      'text',
    );
    if ('features' in outcome) {
      expect(r.err).toBe('');
      expect(r.code).toBe(0);
      expect(r.out).toContain(`on ${outcome.features.length} rows of ${path}`);
      // The z-score statistics are fitted from the rows read: their means are the column
      // means (Welford 1962 agrees with the two-pass formula), so a misread cell shows here.
      const saved = await readModelFile(out);
      const norm = saved.doc.normalise;
      expect(norm?.method).toBe('zscore');
      if (norm?.method === 'zscore') {
        expect(norm.count).toBe(outcome.features.length);
        const want = means(outcome.features);
        Array.from(norm.mean ?? []).forEach((m, k) => expect(m).toBeCloseTo(want[k], 12));
      }
    } else {
      expect(r.code).toBe(2);
      expectOneLineError(r.err, path, outcome.where, outcome.error);
      await expect(readFile(out)).rejects.toThrow();
    }
  });
});
