/**
 * Reading a data file for training: feature columns matched to the model, target columns
 * turned into class indices (from an index or a label name) or regression values.
 */
import { DataError } from '../errors.js';
import { readTable, resolveColumns, type LoadedTable } from '../io/index.js';
import { modelWidths, type ModelDoc } from '../model/index.js';
import type { TuneData } from '../train/config.js';

/** True when the model's targets are classes: a softmax output, or one sigmoid unit (0 / 1). */
export function isClassifier(doc: ModelDoc): boolean {
  const last = [...doc.layers].reverse().find((l) => l.kind === 'dense');
  if (!last || last.kind !== 'dense') return false;
  return last.activation === 'softmax' || (last.activation === 'sigmoid' && last.units === 1);
}

/**
 * Load `file` as training rows for `doc`. `targets` names the target column(s) by header name
 * or 0-based position. Feature columns: matched by name when the model has feature names and
 * the file a header; otherwise every non-target column, in order.
 * @throws DataError naming the file, line and column of a bad cell, an unknown column or a class the model does not know.
 */
export async function loadTrainingData(doc: ModelDoc, file: string, targets: readonly string[]): Promise<TuneData> {
  const classes = isClassifier(doc);
  const refs = targets.map((t) => (/^\d+$/.test(t) ? Number(t) : t));
  const table = await readTable(file, classes ? { textColumns: refs } : {});
  const targetCols = resolveColumns(table.columns, table.width, refs, file);
  const featureCols = featureColumns(doc, table, targetCols, file);
  const x = new Float32Array(table.rows * doc.inputs);
  for (let r = 0; r < table.rows; r++) {
    for (let c = 0; c < featureCols.length; c++) x[r * doc.inputs + c] = table.data[r * table.width + featureCols[c]];
  }
  const widths = modelWidths(doc);
  const outputs = widths[widths.length - 1];
  if (classes) {
    if (targetCols.length !== 1) throw new DataError(file, 0, 0, `a classifier takes one target column, got ${targetCols.length} (${targets.join(', ')})`);
    const cells = table.text.get(targetCols[0]) ?? [];
    const y = new Int32Array(table.rows);
    const classCount = outputs === 1 ? 2 : outputs;
    const header = table.columns ? 1 : 0;
    for (let r = 0; r < table.rows; r++) y[r] = classIndex(cells[r] ?? '', doc.labels, classCount, file, r + 1 + header, targetCols[0] + 1);
    return { x, rows: table.rows, y };
  }
  if (targetCols.length !== outputs) {
    throw new DataError(file, 0, 0, `the model has ${outputs} outputs, so --target needs ${outputs} columns, got ${targetCols.length} (${targets.join(', ')})`);
  }
  const y = new Float32Array(table.rows * outputs);
  for (let r = 0; r < table.rows; r++) {
    for (let k = 0; k < outputs; k++) y[r * outputs + k] = table.data[r * table.width + targetCols[k]];
  }
  return { x, rows: table.rows, y };
}

function featureColumns(doc: ModelDoc, table: LoadedTable, targetCols: readonly number[], file: string): number[] {
  if (doc.features && table.columns) {
    const missing = doc.features.filter((f) => !table.columns!.includes(f));
    if (missing.length === 0) return resolveColumns(table.columns, table.width, doc.features, file);
    throw new DataError(file, 1, 0, `missing feature column${missing.length > 1 ? 's' : ''} ${missing.map((m) => `"${m}"`).join(', ')} (the header has: ${table.columns.join(', ')})`);
  }
  const rest = Array.from({ length: table.width }, (_, i) => i).filter((i) => !targetCols.includes(i));
  if (rest.length !== doc.inputs) {
    throw new DataError(file, 1, 0, `has ${rest.length} feature columns besides the target, but the model takes ${doc.inputs} inputs`);
  }
  return rest;
}

/** A class cell: a label name the model knows, or a whole-number index. */
function classIndex(cell: string, labels: readonly string[] | null, classes: number, file: string, line: number, column: number): number {
  const text = cell.trim();
  if (labels) {
    const i = labels.indexOf(text);
    if (i >= 0) return i;
  }
  if (/^\d+$/.test(text) && Number(text) < classes) return Number(text);
  const known = labels ? `labels ${labels.map((l) => `"${l}"`).join(', ')} or indices 0..${classes - 1}` : `indices 0..${classes - 1}`;
  throw new DataError(file, line, column, `class "${text}" is not one the model knows (${known})`);
}
