/** Reading a data file as model input: columns matched by feature name when both sides have names. */
import { DataError } from '../errors.js';
import { openTable, resolveColumns, shownNames, tableFormatOf, type TableReader } from '../io/index.js';
import type { ModelDoc } from '../model/index.js';

/**
 * Which table columns feed the model's inputs, in the model's order. With feature names in the
 * model and a header in the file, columns are matched by name (any order, extra columns
 * ignored); otherwise the table must have exactly `inputs` columns.
 */
export function inputColumns(doc: ModelDoc, table: Pick<TableReader, 'columns' | 'width'>, file: string): number[] {
  if (doc.features && table.columns) {
    const missing = doc.features.filter((name) => !table.columns!.includes(name));
    if (missing.length === 0) return resolveColumns(table.columns, table.width, doc.features, file);
    // A header that names some features but not all would be read by position, feeding one
    // feature's values into another's input: refuse it. Position is used only when the header
    // shares no name with the model (it names the columns some other way).
    const named = doc.features.length - missing.length;
    if (named > 0 || table.width !== doc.inputs) {
      throw new DataError(file, 1, 0, `missing feature column${missing.length > 1 ? 's' : ''} ${shownNames(missing)} (the header has: ${shownNames(table.columns)})`);
    }
  }
  if (table.width !== doc.inputs) {
    throw new DataError(file, 1, 0, `has ${table.width} columns, but the model takes ${doc.inputs} inputs${doc.features ? ` (${doc.features.join(', ')})` : ''}`);
  }
  return Array.from({ length: doc.inputs }, (_, i) => i);
}

/**
 * Columns of a headed CSV / JSONL file that `doc` does not read (IDs, labels, notes), so they
 * can be read as text: a column the model ignores should not stop a run for not being numeric.
 * Empty when the model has no feature names, the file no header, or the file is NPY.
 */
export async function unusedColumns(doc: ModelDoc, file: string, keep: readonly string[] = []): Promise<string[]> {
  if (!doc.features || tableFormatOf(file) === 'npy') return [];
  const probe = await openTable(file, { chunkRows: 1 });
  const columns = probe.columns;
  await probe.close();
  if (!columns || !doc.features.every((f) => columns.includes(f))) return [];
  return columns.filter((c) => !doc.features!.includes(c) && !keep.includes(c));
}

/** Stream a data file as float32 model inputs, chunk by chunk. */
export async function* inputChunks(doc: ModelDoc, file: string, chunkRows: number): AsyncGenerator<{ rows: number; x: Float32Array; firstLine: number }> {
  const table = await openTable(file, { chunkRows, textColumns: await unusedColumns(doc, file) });
  try {
    const cols = inputColumns(doc, table, file);
    for await (const chunk of table.chunks()) {
      const x = new Float32Array(chunk.rows * cols.length);
      for (let r = 0; r < chunk.rows; r++) {
        for (let c = 0; c < cols.length; c++) x[r * cols.length + c] = chunk.data[r * table.width + cols[c]];
      }
      yield { rows: chunk.rows, x, firstLine: chunk.firstLine };
    }
  } finally {
    await table.close();
  }
}

/** Output column names: the model's labels, else output_0, output_1, ... */
export function outputColumns(doc: ModelDoc, outputs: number): string[] {
  return doc.labels ?? Array.from({ length: outputs }, (_, i) => `output_${i}`);
}
