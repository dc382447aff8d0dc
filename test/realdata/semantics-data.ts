/**
 * The real-data fixtures (test/realdata/prepare.ts: the open datasets python3-sklearn ships) as
 * the semantics suite uses them: one CSV table with a header, class targets spelt by name, the
 * target column named as a user would name it.
 */
import { join } from 'node:path';
import { datasetTable, loadDataset, splitRows as splitIndices, writeCsv as writeCsvFile, type DatasetName } from './prepare.js';

export interface Table {
  readonly header: string[];
  readonly rows: string[][];
}

function table(name: DatasetName, target?: string): Table {
  const ds = loadDataset(name);
  const { header, cells } = datasetTable(ds, { classes: 'name' });
  return { header: target ? [...header.slice(0, -1), target] : header, rows: cells };
}

/** Iris (Fisher 1936): 150 x 4, target `species` (setosa / versicolor / virginica). */
export const iris = (): Table => table('iris', 'species');
/** Wine (Forina et al., UCI): 178 x 13, target `cultivar` (class_0..class_2). */
export const wine = (): Table => table('wine', 'cultivar');
/** Breast Cancer Wisconsin Diagnostic (Street, Wolberg and Mangasarian 1993): 569 x 30, target `diagnosis`. */
export const breastCancer = (): Table => table('breast_cancer', 'diagnosis');
/** Optical handwritten digits (Alpaydin and Kaynak, UCI): 1797 x 64 pixels 0..16, target `digit`. */
export const digits = (): Table => table('digits', 'digit');
/** Diabetes (Efron, Hastie, Johnstone and Tibshirani 2004): 442 x 10, target `progression` (25..346). */
export const diabetes = (): Table => table('diabetes', 'progression');
/** Linnerud (Tenenhaus 1998): 20 rows, exercises Chins, Situps, Jumps; targets Weight, Waist, Pulse. */
export const linnerud = (): Table => table('linnerud');

/** Write a table as CSV with its header into `dir`; returns the path. */
export function writeCsv(dir: string, name: string, data: Table, rows: readonly string[][] = data.rows): string {
  return writeCsvFile(join(dir, name), data.header, rows);
}

/** A seeded split of the rows: `testShare` of them held back for testing. */
export function splitRows(data: Table, testShare: number, seed: number): { train: string[][]; test: string[][] } {
  const { train, test } = splitIndices(data.rows.length, testShare, seed);
  return { train: train.map((i) => data.rows[i]), test: test.map((i) => data.rows[i]) };
}

/** A JSON layer spec without feature names: `inputs`, z-score to fit, hidden ReLU layers, the output layer. */
export function specOf(inputs: number, hidden: number[], outputs: number, activation: string, labels?: string[]): object {
  return {
    inputs,
    normalise: { method: 'zscore' },
    layers: [...hidden.map((size) => ({ kind: 'dense', size, activation: 'relu' })), { kind: 'dense', size: outputs, activation }],
    ...(labels ? { labels } : {}),
  };
}
