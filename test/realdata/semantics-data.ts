/**
 * Open datasets shipped as plain files by the Debian package python3-sklearn
 * (/usr/lib/python3/dist-packages/sklearn/datasets/data/), written out the way users prepare
 * them: a CSV with a header row, the target as a named column. Column names follow the
 * descriptions shipped beside the data (sklearn/datasets/descr/*.rst).
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { gunzipSync } from 'node:zlib';
import { SeededRng } from '../../src/model/index.js';

export const SKLEARN_DATA = '/usr/lib/python3/dist-packages/sklearn/datasets/data';
export const HAVE_SKLEARN_DATA = existsSync(join(SKLEARN_DATA, 'iris.csv'));

export interface Dataset {
  readonly header: string[];
  readonly rows: string[][];
}

function text(name: string): string {
  const bytes = readFileSync(join(SKLEARN_DATA, name));
  return (name.endsWith('.gz') ? gunzipSync(bytes) : bytes).toString('utf8');
}

function lines(name: string): string[] {
  return text(name).split('\n').map((l) => l.trim()).filter((l) => l !== '');
}

/** Files whose first line holds counts and class names: rows, then the class index column turned into its name. */
function countedFile(name: string, features: string[], target: string): Dataset {
  const [first, ...rest] = lines(name);
  const classNames = first.split(',').slice(2);
  const rows = rest.map((l) => {
    const cells = l.split(',');
    return [...cells.slice(0, -1), classNames[Number(cells[cells.length - 1])]];
  });
  return { header: [...features, target], rows };
}

/** Iris (Fisher 1936): 150 x 4, classes setosa / versicolor / virginica. */
export function iris(): Dataset {
  return countedFile('iris.csv', ['sepal_length', 'sepal_width', 'petal_length', 'petal_width'], 'species');
}

/** Wine (Forina et al., UCI): 178 x 13, classes class_0..class_2. */
export function wine(): Dataset {
  const names = ['alcohol', 'malic_acid', 'ash', 'alcalinity_of_ash', 'magnesium', 'total_phenols', 'flavanoids', 'nonflavanoid_phenols', 'proanthocyanins', 'color_intensity', 'hue', 'od280_od315', 'proline'];
  return countedFile('wine_data.csv', names, 'cultivar');
}

/** Breast Cancer Wisconsin Diagnostic (Street, Wolberg and Mangasarian 1993): 569 x 30, malignant / benign. */
export function breastCancer(): Dataset {
  const base = ['radius', 'texture', 'perimeter', 'area', 'smoothness', 'compactness', 'concavity', 'concave_points', 'symmetry', 'fractal_dimension'];
  const names = ['mean', 'error', 'worst'].flatMap((kind) => base.map((b) => `${kind}_${b}`));
  return countedFile('breast_cancer.csv', names, 'diagnosis');
}

/** Optical handwritten digits (Alpaydin and Kaynak, UCI): 1797 x 64 pixels 0..16, digit 0..9; no header in the file. */
export function digits(): Dataset {
  const rows = lines('digits.csv.gz').map((l) => l.split(','));
  return { header: [...Array.from({ length: 64 }, (_, i) => `pixel${i}`), 'digit'], rows };
}

/** Diabetes (Efron, Hastie, Johnstone and Tibshirani 2004): 442 x 10 raw features, target = progression after one year (25..346). */
export function diabetes(): Dataset {
  const x = lines('diabetes_data_raw.csv.gz').map((l) => l.split(/\s+/));
  const y = lines('diabetes_target.csv.gz').map((l) => String(Number(l)));
  return { header: ['age', 'sex', 'bmi', 'bp', 's1', 's2', 's3', 's4', 's5', 's6', 'progression'], rows: x.map((r, i) => [...r, y[i]]) };
}

/** Linnerud (Tenenhaus 1998): 20 rows, 3 exercises and 3 physiological measurements, space-separated with a header. */
export function linnerud(): Dataset {
  const [eh, ...ex] = lines('linnerud_exercise.csv');
  const [ph, ...phys] = lines('linnerud_physiological.csv');
  return { header: [...eh.split(/\s+/), ...ph.split(/\s+/)], rows: ex.map((l, i) => [...l.split(/\s+/), ...phys[i].split(/\s+/)]) };
}

/** Write a dataset as CSV with its header; returns the path. */
export function writeCsv(dir: string, name: string, data: Dataset, rows: readonly string[][] = data.rows): string {
  const path = join(dir, name);
  writeFileSync(path, [data.header.join(','), ...rows.map((r) => r.join(','))].join('\n') + '\n');
  return path;
}

/** A seeded split of the rows: `testShare` of them held back for testing. */
export function splitRows(data: Dataset, testShare: number, seed: number): { train: string[][]; test: string[][] } {
  const rng = new SeededRng(seed);
  const order = data.rows.map((_, i) => i);
  for (let i = order.length - 1; i > 0; i--) {
    const j = Math.floor(rng.next() * (i + 1));
    [order[i], order[j]] = [order[j], order[i]];
  }
  const cut = Math.round(order.length * testShare);
  return { test: order.slice(0, cut).map((i) => data.rows[i]), train: order.slice(cut).map((i) => data.rows[i]) };
}

/** A JSON layer spec: `inputs`, z-score normalisation to fit, hidden ReLU layers, then the output layer. */
export function specOf(inputs: number, hidden: number[], outputs: number, activation: string, labels?: string[]): object {
  return {
    inputs,
    normalise: { method: 'zscore' },
    layers: [...hidden.map((size) => ({ kind: 'dense', size, activation: 'relu' })), { kind: 'dense', size: outputs, activation }],
    ...(labels ? { labels } : {}),
  };
}
