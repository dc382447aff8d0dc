/**
 * Reading a data file for training: feature columns matched to the model, target columns
 * turned into class indices (from an index or a label name) or regression values.
 */
import { DataError } from '../errors.js';
import { openTable, readTable, resolveColumns, shownCell, shownNames, type LoadedTable } from '../io/index.js';
import { modelWidths, type ModelDoc } from '../model/index.js';
import type { TuneData } from '../train/config.js';
import { unusedColumns } from './model-input.js';

/** True when the model's targets are classes: a softmax output, or one sigmoid unit (0 / 1). */
export function isClassifier(doc: ModelDoc): boolean {
  const last = [...doc.layers].reverse().find((l) => l.kind === 'dense');
  if (!last || last.kind !== 'dense') return false;
  return last.activation === 'softmax' || (last.activation === 'sigmoid' && last.size === 1);
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
  // Columns neither feature nor target (IDs, notes) are read as text and ignored.
  const named = refs.filter((r): r is string => typeof r === 'string');
  const ignored = await unusedColumns(doc, file, named);
  const table = await readTable(file, { textColumns: [...(classes ? refs : []), ...ignored] });
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
    for (let r = 0; r < table.rows; r++) {
      const index = classIndex(cells[r] ?? '', doc.labels, classCount);
      if (index === null) {
        throw unknownClass(cells[r] ?? '', doc.labels, classCount, file, await lineOfRow(file, r, refs), targetCols[0] + 1);
      }
      y[r] = index;
    }
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
    throw new DataError(file, 1, 0, `missing feature column${missing.length > 1 ? 's' : ''} ${shownNames(missing)} (the header has: ${shownNames(table.columns)})`);
  }
  const rest = Array.from({ length: table.width }, (_, i) => i).filter((i) => !targetCols.includes(i));
  if (rest.length !== doc.inputs) {
    throw new DataError(file, 1, 0, `has ${rest.length} feature columns besides the target, but the model takes ${doc.inputs} inputs`);
  }
  return rest;
}

/** A class cell: a label name the model knows, or a whole-number index; null when it is neither. */
function classIndex(cell: string, labels: readonly string[] | null, classes: number): number | null {
  const text = cell.trim();
  if (labels) {
    const i = labels.indexOf(text);
    if (i >= 0) return i;
  }
  if (/^\d+$/.test(text) && Number(text) < classes) return Number(text);
  return null;
}

function unknownClass(cell: string, labels: readonly string[] | null, classes: number, file: string, line: number, column: number): DataError {
  const known = labels ? `labels ${shownNames(labels)} or indices 0..${classes - 1}` : `indices 0..${classes - 1}`;
  return new DataError(file, line, column, `class ${shownCell(cell.trim())} is not one the model knows (${known})`);
}

/**
 * The 1-based file line of data row `row` (0-based). Blank lines and quoted cells that span
 * lines make it differ from row + header, so the file is read again, one row per chunk (each
 * chunk names its first line). Only on the error path, so the second read costs nothing
 * that matters.
 */
async function lineOfRow(file: string, row: number, textColumns: readonly (string | number)[]): Promise<number> {
  const table = await openTable(file, { chunkRows: 1, textColumns });
  try {
    let r = 0;
    for await (const chunk of table.chunks()) if (r++ === row) return chunk.firstLine;
  } finally {
    await table.close();
  }
  return 0;
}
