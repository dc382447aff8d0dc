/** Reading a data file as model input: columns matched by feature name when both sides have names. */
import { DataError } from '../errors.js';
import { openNpyFloat32Rows, openTable, resolveColumns, shownNames, tableFormatOf, type TableReader } from '../io/index.js';
import type { ModelDoc } from '../model/index.js';

/**
 * Which table columns feed the model's inputs, in the model's order. With feature names in the
 * model and a header in the file, columns are matched by name (any order, extra columns
 * ignored); otherwise the table's named columns are taken in order and must number `inputs`.
 * A column with an empty header name (a dataframe's index, a comma ending every line) is never
 * an input.
 */
export function inputColumns(doc: ModelDoc, table: Pick<TableReader, 'columns' | 'width'>, file: string): number[] {
  const named = namedColumns(table);
  if (doc.features && table.columns) {
    const missing = doc.features.filter((name) => !table.columns!.includes(name));
    if (missing.length === 0) return resolveColumns(table.columns, table.width, doc.features, file);
    // A header that names some features but not all would be read by position, feeding one
    // feature's values into another's input: refuse it. Position is used only when the header
    // shares no name with the model (it names the columns some other way).
    const shared = doc.features.length - missing.length;
    if (shared > 0 || named.length !== doc.inputs) {
      throw new DataError(
        file,
        1,
        0,
        `missing feature column${missing.length > 1 ? 's' : ''} ${shownNames(missing)} (the header has: ${shownNames(table.columns.filter((c) => c !== ''))})`,
      );
    }
  }
  if (named.length !== doc.inputs) {
    const unnamed = table.width - named.length;
    const error = new DataError(
      file,
      1,
      0,
      `has ${named.length} columns${unnamed > 0 ? ` (besides ${unnamed} unnamed)` : ''}, but the model takes ${doc.inputs} inputs${doc.features ? ` (${doc.features.join(', ')})` : ''}`,
    );
    // Without feature names a model reads columns by position, so it cannot tell a target or an
    // id column from its inputs.
    if (!doc.features && table.columns)
      error.withHint('the model has no feature names: remove the other columns, or give it names (a spec\'s "features", or tune it on this header)');
    // A file without a header (an NPY array, a headerless table) is read by position alone.
    else if (!table.columns && named.length > doc.inputs)
      error.withHint(
        `a file without column names must hold exactly the ${doc.inputs} inputs, in order: drop the other columns first (numpy: a[:, :${doc.inputs}] when they come last)`,
      );
    throw error;
  }
  return named;
}

/** Positions of the columns that can be read: all, less those with an empty header name. */
export function namedColumns(table: Pick<TableReader, 'columns' | 'width'>): number[] {
  const all = Array.from({ length: table.width }, (_, i) => i);
  return table.columns ? all.filter((i) => table.columns![i] !== '') : all;
}

/** The columns and width of a data file, from its header or first row, and its row count when the header declares it (the file is opened and closed). */
export async function tableLayout(file: string): Promise<Pick<TableReader, 'columns' | 'width' | 'rowsTotal'>> {
  // Only the header (or first row) is looked at: no cell is parsed as a number.
  const probe = await openTable(file, { chunkRows: 1 });
  try {
    return { columns: probe.columns, width: probe.width, rowsTotal: probe.rowsTotal };
  } finally {
    await probe.close();
  }
}

/** Positions in 0..width-1 that are not in `used`: the columns to skip. */
export function otherColumns(width: number, used: readonly number[]): number[] {
  return Array.from({ length: width }, (_, i) => i).filter((i) => !used.includes(i));
}

/**
 * Stream a data file as float32 model inputs, chunk by chunk. Columns the model does not read
 * are never parsed, so a blank label column or an ID column cannot stop a run. With `reuse`, a
 * float32 NPY file's chunks may share memory: a chunk's `x` is overwritten once the next is asked for.
 */
export async function* inputChunks(
  doc: ModelDoc,
  file: string,
  chunkRows: number,
  opts: { reuse?: boolean } = {},
): AsyncGenerator<{ rows: number; x: Float32Array; firstLine: number }> {
  const layout = await tableLayout(file);
  const cols = inputColumns(doc, layout, file);
  // A float32 NPY file is one block of the very numbers the model takes: read it straight into
  // the arrays handed out (NPY has no header names, so its columns are the inputs in order).
  const direct =
    tableFormatOf(file) === 'npy' && cols.every((c, i) => c === i) && cols.length === layout.width ? await openNpyFloat32Rows(file, chunkRows, opts) : null;
  if (direct) {
    try {
      for await (const chunk of direct.chunks()) yield { rows: chunk.rows, x: chunk.data, firstLine: chunk.firstLine };
    } finally {
      await direct.close();
    }
    return;
  }
  // The header question is settled once, by the look above, whatever columns are skipped.
  const table = await openTable(file, { chunkRows, header: layout.columns !== null, skipColumns: otherColumns(layout.width, cols) });
  try {
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

/**
 * The first `maxRows` rows of a data file as model inputs, in one float32 array (rows x inputs).
 * @throws DataError for a bad cell or columns that do not fit the model; and when the file has no rows.
 */
export async function readInputRows(doc: ModelDoc, file: string, maxRows: number): Promise<{ x: Float32Array; rows: number }> {
  const parts: Float32Array[] = [];
  let rows = 0;
  for await (const chunk of inputChunks(doc, file, 4096)) {
    const take = Math.min(chunk.rows, maxRows - rows);
    parts.push(chunk.x.subarray(0, take * doc.inputs));
    rows += take;
    if (rows >= maxRows) break;
  }
  if (rows === 0) throw new DataError(file, 0, 0, 'has no rows');
  const x = new Float32Array(rows * doc.inputs);
  let at = 0;
  for (const p of parts) {
    x.set(p, at);
    at += p.length;
  }
  return { x, rows };
}

/** Output column names: the model's labels, else output_0, output_1, ... */
export function outputColumns(doc: ModelDoc, outputs: number): string[] {
  return doc.labels ?? Array.from({ length: outputs }, (_, i) => `output_${i}`);
}
