/**
 * Reading real files: the open datasets in test/fixtures/realdata (Debian package
 * python3-sklearn, authors in that folder's README.md) prepared the way users prepare them.
 * Each test is named after what a user does; the dataset and its source sit beside the check.
 */
import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadTrainingData } from '../../src/cli/training-data.js';
import { inputChunks } from '../../src/cli/model-input.js';
import { buildModelFromSpecFile } from '../../src/cli/commands/pack.js';
import { DataError } from '../../src/errors.js';
import { readModelFile } from '../../src/format/index.js';
import type { ModelDoc } from '../../src/model/index.js';
import { runCli } from '../cli/run-cli.js';
import {
  REALDATA_DIR,
  datasetObjects,
  datasetTable,
  loadDataset,
  splitRows,
  workFolder,
  writeCsv,
  writeDatasetNpy,
  writeJsonl,
  writeSpec,
  type DatasetName,
} from './prepare.js';

const path = workFolder();

describe('the shipped datasets parse to their documented shapes', () => {
  // Row, feature and class counts as REFERENCES.md and sklearn's descr/*.rst state them.
  const shapes: [DatasetName, number, number, number | null][] = [
    ['iris', 150, 4, 3],
    ['wine', 178, 13, 3],
    ['breast_cancer', 569, 30, 2],
    ['digits', 1797, 64, 10],
    ['diabetes', 442, 10, null],
    ['linnerud', 20, 3, null],
  ];
  it.each(shapes)('%s has %i rows of %i features', (name, rows, features, classes) => {
    const ds = loadDataset(name);
    expect(ds.x.length).toBe(rows);
    expect(ds.y.length).toBe(rows);
    expect(ds.x.every((r) => r.length === features && r.every(Number.isFinite))).toBe(true);
    expect(ds.classNames?.length ?? null).toBe(classes);
    if (classes !== null) expect(new Set(ds.y.map((t) => t[0])).size).toBe(classes);
  });
});

async function specDoc(name: string, ds: ReturnType<typeof loadDataset>, extra: Record<string, unknown> = {}, hidden = [8]): Promise<ModelDoc> {
  return buildModelFromSpecFile(writeSpec(path(`${name}.json`), ds, hidden, extra), { seed: 1 });
}

async function dataError(action: () => Promise<unknown>): Promise<DataError> {
  try {
    await action();
  } catch (error) {
    expect(error).toBeInstanceOf(DataError);
    return error as DataError;
  }
  throw new Error('expected a DataError');
}

const f32 = (values: number[]): number[] => values.map(Math.fround);

describe('multi-output targets are matched to the output labels by name (Linnerud, Tenenhaus 1998; python3-sklearn)', () => {
  const ds = loadDataset('linnerud');
  let doc: ModelDoc;
  let csv: string;
  beforeAll(async () => {
    // Labels in the order the physiological file has them: Weight, Waist, Pulse.
    doc = await specDoc('linnerud', ds);
    const t = datasetTable(ds);
    csv = writeCsv(path('linnerud.csv'), t.header, t.cells);
  });

  it('a user names the targets Pulse,Weight,Waist: each output gets its own column, not the one at its position', async () => {
    expect(doc.labels).toEqual(['Weight', 'Waist', 'Pulse']);
    const data = await loadTrainingData(doc, csv, ['Pulse', 'Weight', 'Waist']);
    // Row 1 of linnerud_physiological.csv: Weight 191, Waist 36, Pulse 50.
    expect(Array.from(data.y.subarray(0, 3))).toEqual([191, 36, 50]);
    expect(Array.from(data.y)).toEqual(ds.y.flat());
  });

  it('a user names a target that is not an output label: refused, naming it and the labels', async () => {
    const t = datasetTable(ds);
    const renamed = writeCsv(
      path('linnerud-renamed.csv'),
      t.header.map((h) => (h === 'Pulse' ? 'pulse_bpm' : h)),
      t.cells,
    );
    const e = await dataError(() => loadTrainingData(doc, renamed, ['pulse_bpm', 'Weight', 'Waist']));
    expect(e.detail).toMatch(/--target "pulse_bpm" is not among the model's output labels \("Weight", "Waist", "Pulse"\)/);
  });

  it('a user gives the targets by position: taken in the order given (documented in the README)', async () => {
    // Header: Chins, Situps, Jumps, Weight, Waist, Pulse; positions 5,3,4 = Pulse, Weight, Waist.
    const data = await loadTrainingData(doc, csv, ['5', '3', '4']);
    expect(Array.from(data.y.subarray(0, 3))).toEqual([50, 191, 36]);
  });

  it('tune with the targets out of order saves the same model as with them in label order (and not the positional one)', async () => {
    const spec = path('linnerud.json');
    const run = async (targets: string, out: string): Promise<number[]> => {
      const r = await runCli('tune', spec, '--data', csv, '--target', targets, '-o', path(out), '--epochs', '3', '--engine', 'js', '--log', 'text');
      expect(r.code).toBe(0);
      const saved = await readModelFile(path(out));
      return saved.doc.layers.flatMap((l) => ('weight' in l ? Array.from(l.weight) : []));
    };
    const byName = await run('Pulse,Weight,Waist', 'l-name.tendon');
    expect(byName).toEqual(await run('Weight,Waist,Pulse', 'l-order.tendon'));
    expect(byName).not.toEqual(await run('5,3,4', 'l-position.tendon'));
  });
});

describe('one sigmoid output with one label (Breast Cancer Wisconsin, Street, Wolberg and Mangasarian 1993; python3-sklearn: 0 malignant, 1 benign)', () => {
  const ds = loadDataset('breast_cancer');
  let doc: ModelDoc;
  beforeAll(async () => {
    doc = await specDoc('cancer-sigmoid', ds, { labels: ['benign'], layers: [{ kind: 'dense', size: 1, activation: 'sigmoid' }] });
  });
  const spelled = (spell: (c: number) => string, rows?: number[]): string => {
    const t = datasetTable(ds, { rows });
    const cells = t.cells.map((row, i) => [...row.slice(0, -1), spell(ds.y[rows ? rows[i] : i][0])]);
    return writeCsv(path(`cancer-${Math.random().toString(36).slice(2)}.csv`), t.header, cells);
  };

  it('a user writes the positive class by its label and the other as 0: "benign" reads as 1, "0" as 0', async () => {
    const file = spelled((c) => (c === 1 ? 'benign' : '0'));
    const data = await loadTrainingData(doc, file, ['target']);
    expect(Array.from(data.y)).toEqual(ds.y.map((t) => t[0]));
    // 357 benign and 212 malignant rows (sklearn's breast_cancer.rst class distribution).
    expect(Array.from(data.y).filter((c) => c === 1).length).toBe(357);
  });

  it('a user writes "benign" and "1" for the same class: refused as a mixed column', async () => {
    const file = spelled((c) => (c === 1 ? 'benign' : '0'));
    const text = readFileSync(file, 'utf8').split('\n');
    // The second benign row written as 1 instead of its name.
    const second = text.findIndex((l, i) => i > 0 && l.endsWith(',benign') && text.slice(1, i).some((m) => m.endsWith(',benign')));
    text[second] = text[second].replace(/,benign$/, ',1');
    writeFileSync(file, text.join('\n'));
    const e = await dataError(() => loadTrainingData(doc, file, ['target']));
    expect(e.detail).toMatch(/mixes class names and indices/);
    expect(e.line).toBe(second + 1);
  });

  it('a user trains on benign rows only: a one-line warning says the targets hold a single class', async () => {
    const benign = ds.y.map((t, i) => (t[0] === 1 ? i : -1)).filter((i) => i >= 0);
    const file = spelled((c) => String(c), benign);
    const warnings: string[] = [];
    const data = await loadTrainingData(doc, file, ['target'], (m) => warnings.push(m));
    expect(data.rows).toBe(357);
    expect(warnings).toHaveLength(1);
    expect(warnings[0]).toMatch(/every one of the 357 target cells in column "target" is class 1 \("benign"\)/);
  });
});

describe('class cells in CSV (Wine, Forina et al., UCI; Iris, Fisher 1936; python3-sklearn)', () => {
  it('a dataframe wrote the wine classes as 0.0, 1.0, 2.0: read as class indices', async () => {
    const ds = loadDataset('wine');
    const doc = await specDoc('wine', ds);
    const t = datasetTable(ds, { classes: 'float' });
    expect(t.cells[0].at(-1)).toBe('0.0');
    const data = await loadTrainingData(doc, writeCsv(path('wine-float-classes.csv'), t.header, t.cells), ['target']);
    expect(Array.from(data.y)).toEqual(ds.y.map((r) => r[0]));
  });

  it('a user joins a file of iris class names with one of indices: refused at the first row written the other way', async () => {
    const ds = loadDataset('iris');
    const doc = await specDoc('iris', ds);
    const names = datasetTable(ds, { classes: 'name', rows: [0, 1, 2] });
    const indices = datasetTable(ds, { classes: 'index', rows: [50, 51] });
    const file = writeCsv(path('iris-joined.csv'), names.header, [...names.cells, ...indices.cells]);
    const e = await dataError(() => loadTrainingData(doc, file, ['target']));
    expect([e.line, e.column]).toEqual([5, 5]);
    expect(e.detail).toMatch(/"setosa" on line 2, "1" on line 5/);
  });
});

describe('NPY files with the target as a column, as NumPy saves them (make-npy.py in test/fixtures/realdata)', () => {
  const npy = (name: string): string => join(REALDATA_DIR, name);

  it.each([
    ['digits-int64.npy', 300, 'digits'],
    ['digits-int32.npy', 300, 'digits'],
    ['digits-uint8.npy', 1797, 'digits'],
    ['iris-float64.npy', 150, 'iris'],
    ['iris-float16.npy', 150, 'iris'],
    ['wine-fortran.npy', 178, 'wine'],
  ] as const)('a user trains a classifier from %s with the target given by position', async (file, rows, name) => {
    const ds = loadDataset(name);
    const doc = await specDoc(`npy-${name}`, ds, { features: undefined });
    const target = String(ds.features.length);
    const data = await loadTrainingData({ ...doc, features: null }, npy(file), [target]);
    expect(data.rows).toBe(rows);
    expect(Array.from(data.y)).toEqual(ds.y.slice(0, rows).map((r) => r[0]));
    // Features as the dataset has them; float16 rounds them (IEEE 754 binary16, 11 significant bits).
    const tolerance = file.includes('float16') ? 2 ** -8 : 0;
    const first = Array.from(data.x.subarray(0, ds.features.length));
    first.forEach((v, k) => expect(Math.abs(v - Math.fround(ds.x[0][k]))).toBeLessThanOrEqual(tolerance * Math.abs(ds.x[0][k])));
    const last = Array.from(data.x.subarray((rows - 1) * ds.features.length, rows * ds.features.length));
    last.forEach((v, k) => expect(Math.abs(v - Math.fround(ds.x[rows - 1][k]))).toBeLessThanOrEqual(tolerance * Math.abs(ds.x[rows - 1][k])));
  });

  it('a user scores a big-endian float64 array (breast cancer, first 100 rows): same values as the CSV', async () => {
    const ds = loadDataset('breast_cancer');
    const doc = await specDoc('cancer-npy', ds);
    const noTarget = { ...doc, features: null, inputs: 31 } as ModelDoc;
    const chunks = [];
    for await (const c of inputChunks(noTarget, npy('breast-cancer-big-endian.npy'), 4096)) chunks.push(c);
    expect(chunks[0].rows).toBe(100);
    expect(Array.from(chunks[0].x.subarray(0, 31))).toEqual(f32([...ds.x[0], ds.y[0][0]]));
  });

  it('a user saves the digits as 8 x 8 images (a 3-D array): refused, not flattened', async () => {
    const ds = loadDataset('digits');
    const doc = await specDoc('digits-3d', ds);
    const e = await dataError(async () => {
      for await (const c of inputChunks({ ...doc, features: null }, npy('digits-3d.npy'), 4096)) void c;
    });
    expect(e.detail).toMatch(/NPY array has 3 dimensions \(50, 8, 8\); a table needs 1 or 2 .*reshape it to \(50, 64\)/);
  });

  it('a user saves iris with float32 and trains through the CLI with --target 4', async () => {
    const ds = loadDataset('iris');
    const spec = writeSpec(path('iris-npy.json'), ds, [8], { features: undefined });
    const file = writeDatasetNpy(path('iris-f4.npy'), ds, '<f4');
    const r = await runCli('tune', spec, '--data', file, '--target', '4', '-o', path('iris-npy.tendon'), '--epochs', '1', '--engine', 'js', '--log', 'text');
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    expect(r.out).toContain('on 150 rows of');
  });
});

describe('JSONL as users write it (Iris, Fisher 1936; python3-sklearn)', () => {
  const ds = loadDataset('iris');
  let doc: ModelDoc;
  beforeAll(async () => {
    doc = await specDoc('iris-jsonl', ds);
  });

  it('a user writes integer class indices and extra keys of every type (id, nested object, null, booleans, a key on some lines only)', async () => {
    const objects = datasetObjects(ds).map((o, i) => ({
      id: i + 1,
      ...o,
      source: { file: 'iris.csv', row: i },
      checked: i % 2 === 0,
      note: null,
      ...(i % 10 === 0 ? { remark: 'first of ten' } : {}),
    }));
    const file = writeJsonl(path('iris.jsonl'), objects);
    const data = await loadTrainingData(doc, file, ['target']);
    expect(data.rows).toBe(150);
    expect(Array.from(data.y)).toEqual(ds.y.map((r) => r[0]));
    expect(Array.from(data.x.subarray(0, 4))).toEqual(f32(ds.x[0]));
    const scored = [];
    for await (const c of inputChunks(doc, file, 64)) scored.push(c.rows);
    expect(scored).toEqual([64, 64, 22]);
  });

  it('a user leaves out a feature key on one line: refused at that line, naming the key', async () => {
    const objects = datasetObjects(ds);
    delete objects[6]['petal width (cm)'];
    const file = writeJsonl(path('iris-missing.jsonl'), objects);
    const e = await dataError(() => loadTrainingData(doc, file, ['target']));
    expect([e.line, e.column]).toEqual([7, 4]);
    expect(e.detail).toMatch(/key "petal width \(cm\)" is missing/);
  });
});

describe('CSV files as users have them (Breast Cancer Wisconsin; Diabetes, Efron et al. 2004; python3-sklearn)', () => {
  const ds = loadDataset('breast_cancer');
  let doc: ModelDoc;
  beforeAll(async () => {
    doc = await specDoc('cancer', ds);
  });
  const firstRow = async (file: string): Promise<number[]> => {
    for await (const c of inputChunks(doc, file, 4096)) return Array.from(c.x.subarray(0, 30));
    return [];
  };

  it('a user scores new rows whose label column is blank', async () => {
    const t = datasetTable(ds, { classes: 'name' });
    const cells = t.cells.map((row) => [...row.slice(0, -1), '']);
    const file = writeCsv(path('cancer-blank-label.csv'), t.header, cells);
    expect(await firstRow(file)).toEqual(f32(ds.x[0]));
  });

  it('a dataframe wrote its index column first and a comma ended every line', async () => {
    const t = datasetTable(ds);
    const file = writeCsv(path('cancer-index.csv'), t.header, t.cells, { indexColumn: true, trailingSeparator: true });
    expect(readFileSync(file, 'utf8').split('\n')[1].startsWith('0,17.99,')).toBe(true);
    expect(await firstRow(file)).toEqual(f32(ds.x[0]));
    const data = await loadTrainingData(doc, file, ['target']);
    expect(Array.from(data.y)).toEqual(ds.y.map((r) => r[0]));
  });

  it('a spreadsheet saved the file with semicolons (the header tells), and another as .tsv', async () => {
    const t = datasetTable(ds);
    const semi = writeCsv(path('cancer-semicolon.csv'), t.header, t.cells, { separator: ';' });
    const tsv = writeCsv(path('cancer.tsv'), t.header, t.cells, { separator: '\t' });
    expect(await firstRow(semi)).toEqual(f32(ds.x[0]));
    expect(await firstRow(tsv)).toEqual(f32(ds.x[0]));
  });

  it('a cell of 1e39 (past float32) is refused at its line and column in score and tune', async () => {
    const diabetes = loadDataset('diabetes');
    const spec = writeSpec(path('diabetes.json'), diabetes, [4]);
    const t = datasetTable(diabetes);
    t.cells[4][2] = '1e39';
    const file = writeCsv(path('diabetes-overflow.csv'), t.header, t.cells);
    const tune = await runCli('tune', spec, '--data', file, '--target', 'target', '-o', path('d.tendon'), '--epochs', '1', '--engine', 'js', '--log', 'text');
    expect(tune.code).toBe(2);
    expect(tune.err).toBe(`tendon: ${file}:6:3: cell "1e39" in column "bmi" is out of the float32 range (largest finite: 3.4028235e38)\n`);
    const clean = writeCsv(path('diabetes.csv'), datasetTable(diabetes).header, datasetTable(diabetes).cells);
    const model = path('diabetes.tendon');
    expect((await runCli('tune', spec, '--data', clean, '--target', 'target', '-o', model, '--epochs', '1', '--engine', 'js', '--log', 'text')).code).toBe(0);
    const score = await runCli('score', model, '--input', file, '--output', path('d-scores.csv'));
    expect(score.code).toBe(2);
    expect(score.err).toMatch(/diabetes-overflow\.csv:6:3: cell "1e39" in column "bmi" is out of the float32 range/);
  });

  it('a user splits the rows, then scores and checks the held-out file with its label column left in', async () => {
    const { train, test } = splitRows(ds.x.length, 0.2, 3);
    const spec = path('cancer.json');
    const tr = datasetTable(ds, { rows: train, classes: 'name' });
    const te = datasetTable(ds, { rows: test, classes: 'name' });
    const trainFile = writeCsv(path('cancer-train.csv'), tr.header, tr.cells);
    const testFile = writeCsv(
      path('cancer-test.csv'),
      te.header,
      te.cells.map((r, i) => (i % 3 === 0 ? [...r.slice(0, -1), ''] : r)),
    );
    const model = path('cancer.tendon');
    expect((await runCli('tune', spec, '--data', trainFile, '--target', 'target', '-o', model, '--epochs', '1', '--engine', 'js', '--log', 'text')).code).toBe(
      0,
    );
    const scored = await runCli('score', model, '--input', testFile, '--output', path('cancer-scores.csv'));
    expect(scored.err).toMatch(new RegExp(`^scored ${test.length} rows`));
    const checked = await runCli('check', model, '--input', testFile, '--engine', 'js');
    expect(checked.code).toBe(0);
    expect(checked.out).toContain(`${test.length} rows from ${testFile}`);
  });
});
