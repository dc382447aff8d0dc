/**
 * The open datasets in test/fixtures/realdata (copied from the Debian package python3-sklearn,
 * sklearn/datasets/data/; authors in that folder's README.md), read as shipped and written
 * back out the way users prepare files: CSV with a header, JSONL objects, NPY with the target
 * as a column. Shared by the real-data suites (reading and semantics).
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { gunzipSync } from 'node:zlib';
import { afterAll } from 'vitest';
import { encodeNpy } from '../../src/io/index.js';

export const REALDATA_DIR = fileURLToPath(new URL('../fixtures/realdata/', import.meta.url));

export type DatasetName = 'iris' | 'wine' | 'breast_cancer' | 'digits' | 'diabetes' | 'linnerud';

/** A dataset as numbers: features, and targets (class indices, or values per target column). */
export interface Dataset {
  name: DatasetName;
  /** Where it comes from, for test titles and comments. */
  source: string;
  features: string[];
  /** Target column names: ['target'] for one class or value column; linnerud has three. */
  targets: string[];
  /** Class names by index (classifiers only), from the files' first line. */
  classNames: string[] | null;
  x: number[][];
  /** One entry per row: the class index, or the target values. */
  y: number[][];
}

// Feature names as scikit-learn's sklearn/datasets/_base.py (same Debian package) gives them.
const IRIS_FEATURES = ['sepal length (cm)', 'sepal width (cm)', 'petal length (cm)', 'petal width (cm)'];
const WINE_FEATURES = [
  'alcohol',
  'malic_acid',
  'ash',
  'alcalinity_of_ash',
  'magnesium',
  'total_phenols',
  'flavanoids',
  'nonflavanoid_phenols',
  'proanthocyanins',
  'color_intensity',
  'hue',
  'od280/od315_of_diluted_wines',
  'proline',
];
const CANCER_PARTS = ['radius', 'texture', 'perimeter', 'area', 'smoothness', 'compactness', 'concavity', 'concave points', 'symmetry', 'fractal dimension'];
const CANCER_FEATURES = [...CANCER_PARTS.map((p) => `mean ${p}`), ...CANCER_PARTS.map((p) => `${p} error`), ...CANCER_PARTS.map((p) => `worst ${p}`)];
const DIABETES_FEATURES = ['age', 'sex', 'bmi', 'bp', 's1', 's2', 's3', 's4', 's5', 's6'];
const DIGITS_FEATURES = Array.from({ length: 64 }, (_, i) => `pixel_${Math.floor(i / 8)}_${i % 8}`);

const SOURCE = 'python3-sklearn sklearn/datasets/data';

function fixtureText(file: string): string {
  const bytes = readFileSync(join(REALDATA_DIR, file));
  return (file.endsWith('.gz') ? gunzipSync(bytes) : bytes).toString('utf8');
}

function numberRows(text: string, separator: RegExp): number[][] {
  return text
    .split(/\r?\n/)
    .filter((line) => line.trim() !== '')
    .map((line) => line.trim().split(separator).map(Number));
}

/** iris / wine / breast_cancer: first line "count,width,class names...", then rows with the class last. */
function countedClassFile(name: DatasetName, file: string, features: string[], authors: string): Dataset {
  const [first, ...rest] = fixtureText(file).split(/\r?\n/);
  const classNames = first.split(',').slice(2);
  const rows = numberRows(rest.join('\n'), /,/);
  return {
    name,
    source: `${authors}; ${SOURCE}/${file}`,
    features,
    targets: ['target'],
    classNames,
    x: rows.map((r) => r.slice(0, features.length)),
    y: rows.map((r) => [r[features.length]]),
  };
}

const cache = new Map<DatasetName, Dataset>();

/** A dataset from the fixtures folder, parsed once per test file. */
export function loadDataset(name: DatasetName): Dataset {
  const hit = cache.get(name);
  if (hit) return hit;
  let ds: Dataset;
  switch (name) {
    case 'iris':
      ds = countedClassFile(name, 'iris.csv', IRIS_FEATURES, 'Iris, Fisher 1936');
      break;
    case 'wine':
      ds = countedClassFile(name, 'wine_data.csv', WINE_FEATURES, 'Wine, Forina et al. (UCI)');
      break;
    case 'breast_cancer':
      ds = countedClassFile(name, 'breast_cancer.csv', CANCER_FEATURES, 'Breast Cancer Wisconsin, Street, Wolberg and Mangasarian 1993');
      break;
    case 'digits': {
      const rows = numberRows(fixtureText('digits.csv.gz'), /,/);
      ds = {
        name,
        source: `optical digits, Alpaydin and Kaynak (UCI); ${SOURCE}/digits.csv.gz`,
        features: DIGITS_FEATURES,
        targets: ['target'],
        classNames: Array.from({ length: 10 }, (_, i) => String(i)),
        x: rows.map((r) => r.slice(0, 64)),
        y: rows.map((r) => [r[64]]),
      };
      break;
    }
    case 'diabetes': {
      const x = numberRows(fixtureText('diabetes_data_raw.csv.gz'), /\s+/);
      const y = numberRows(fixtureText('diabetes_target.csv.gz'), /\s+/);
      ds = {
        name,
        source: `diabetes, Efron, Hastie, Johnstone and Tibshirani 2004; ${SOURCE}/diabetes_data_raw.csv.gz, diabetes_target.csv.gz`,
        features: DIABETES_FEATURES,
        targets: ['target'],
        classNames: null,
        x,
        y,
      };
      break;
    }
    case 'linnerud': {
      const [exHead, ...exRows] = fixtureText('linnerud_exercise.csv').trim().split(/\r?\n/);
      const [phHead, ...phRows] = fixtureText('linnerud_physiological.csv').trim().split(/\r?\n/);
      ds = {
        name,
        source: `Linnerud, Tenenhaus 1998; ${SOURCE}/linnerud_exercise.csv, linnerud_physiological.csv`,
        features: exHead.trim().split(/\s+/),
        targets: phHead.trim().split(/\s+/),
        classNames: null,
        x: numberRows(exRows.join('\n'), /\s+/),
        y: numberRows(phRows.join('\n'), /\s+/),
      };
      break;
    }
  }
  cache.set(name, ds);
  return ds;
}

/** A temporary folder removed after the test file; returns a function naming a path in it. */
export function workFolder(): (name: string) => string {
  const dir = mkdtempSync(join(tmpdir(), 'tendon-realdata-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  return (name) => join(dir, name);
}

/** How class targets are spelt in a prepared file. */
export type ClassSpelling = 'index' | 'name' | 'float';

export interface TableShape {
  /** Rows to keep (default: all), e.g. one side of `splitRows`. */
  rows?: readonly number[];
  /** Class cells as indices ("2"), names ("virginica") or float-looking indices ("2.0"). */
  classes?: ClassSpelling;
  /** Target columns first or last (default last), as users put them either way. */
  targetAt?: 'first' | 'last';
}

/** Header and cells of a dataset as users lay it out: features then the target column(s). */
export function datasetTable(ds: Dataset, shape: TableShape = {}): { header: string[]; cells: string[][] } {
  const keep = shape.rows ?? ds.x.map((_, i) => i);
  const spell = (v: number): string => {
    if (!ds.classNames) return String(v);
    if (shape.classes === 'name') return ds.classNames[v];
    if (shape.classes === 'float') return v.toFixed(1);
    return String(v);
  };
  const cells = keep.map((r) => {
    const features = ds.x[r].map(String);
    const targets = ds.y[r].map(spell);
    return shape.targetAt === 'first' ? [...targets, ...features] : [...features, ...targets];
  });
  const header = shape.targetAt === 'first' ? [...ds.targets, ...ds.features] : [...ds.features, ...ds.targets];
  return { header, cells };
}

export interface CsvShape {
  /** Cell separator (default ","). */
  separator?: string;
  /** A leading unnamed row-number column, as dataframe libraries write by default. */
  indexColumn?: boolean;
  /** A comma after the last cell of every line (an empty-named last column). */
  trailingSeparator?: boolean;
  lineEnd?: string;
}

/** Writes header + cells as CSV text (no quoting needed for these datasets' names except commas). */
export function writeCsv(path: string, header: readonly string[] | null, cells: readonly (readonly string[])[], shape: CsvShape = {}): string {
  const sep = shape.separator ?? ',';
  const quote = (cell: string): string => (cell.includes(sep) || cell.includes('"') ? `"${cell.replace(/"/g, '""')}"` : cell);
  const line = (row: readonly string[], index: string): string => {
    const all = shape.indexColumn ? [index, ...row] : [...row];
    return all.map(quote).join(sep) + (shape.trailingSeparator ? sep : '');
  };
  const eol = shape.lineEnd ?? '\n';
  const lines = header ? [line(header, '')] : [];
  cells.forEach((row, i) => lines.push(line(row, String(i))));
  writeFileSync(path, lines.join(eol) + eol);
  return path;
}

/** Writes one JSON object per line. */
export function writeJsonl(path: string, objects: readonly Record<string, unknown>[]): string {
  writeFileSync(path, objects.map((o) => JSON.stringify(o)).join('\n') + '\n');
  return path;
}

/** JSONL objects of a dataset: feature and target keys with numbers (class indices as numbers or names). */
export function datasetObjects(ds: Dataset, shape: TableShape = {}): Record<string, unknown>[] {
  const keep = shape.rows ?? ds.x.map((_, i) => i);
  return keep.map((r) => {
    const o: Record<string, unknown> = {};
    ds.features.forEach((f, k) => (o[f] = ds.x[r][k]));
    ds.targets.forEach((t, k) => (o[t] = ds.classNames && shape.classes === 'name' ? ds.classNames[ds.y[r][k]] : ds.y[r][k]));
    return o;
  });
}

/** A rows x (features + targets) NPY matrix, the target(s) as the last column(s), float32 or float64. */
export function writeDatasetNpy(path: string, ds: Dataset, dtype: '<f4' | '<f8' = '<f8', rows?: readonly number[]): string {
  const keep = rows ?? ds.x.map((_, i) => i);
  const width = ds.features.length + ds.targets.length;
  const data = new Float64Array(keep.length * width);
  keep.forEach((r, i) => {
    data.set(ds.x[r], i * width);
    data.set(ds.y[r], i * width + ds.features.length);
  });
  writeFileSync(path, encodeNpy(data, [keep.length, width], dtype));
  return path;
}

/** A seeded shuffle split: `fraction` of the rows for testing, the rest for training. */
export function splitRows(count: number, fraction: number, seed = 1): { train: number[]; test: number[] } {
  let a = seed >>> 0;
  const random = (): number => {
    // Mulberry32 (common practice for a small seeded generator).
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  const order = Array.from({ length: count }, (_, i) => i);
  for (let i = count - 1; i > 0; i--) {
    const j = Math.floor(random() * (i + 1));
    [order[i], order[j]] = [order[j], order[i]];
  }
  const cut = Math.round(count * fraction);
  return { test: order.slice(0, cut).sort((p, q) => p - q), train: order.slice(cut).sort((p, q) => p - q) };
}

/** A JSON layer spec for a dataset (what `tendon tune SPEC.json` takes), written to `path`. */
export function writeSpec(path: string, ds: Dataset, hidden: number[] = [16], extra: Record<string, unknown> = {}): string {
  const outputs = ds.classNames ? ds.classNames.length : ds.targets.length;
  const last = ds.classNames ? { kind: 'dense', size: outputs, activation: 'softmax' } : { kind: 'dense', size: outputs, activation: 'linear' };
  const spec = {
    inputs: ds.features.length,
    features: ds.features,
    labels: ds.classNames ?? ds.targets,
    normalise: { method: 'zscore' },
    layers: [...hidden.map((size) => ({ kind: 'dense', size, activation: 'relu' })), last],
    ...extra,
  };
  writeFileSync(path, JSON.stringify(spec, null, 2));
  return path;
}
