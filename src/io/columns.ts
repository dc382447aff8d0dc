/**
 * Column lookup by header name or position, and picking columns out of a loaded table.
 */
import { DataError } from '../errors.js';
import { shownNames } from './file-errors.js';
import type { ColumnRef, LoadedTable } from './table-types.js';

/**
 * Maps column names or 0-based positions to positions. `file` names the table in errors.
 *
 * @example resolveColumns(['a', 'b', 'c'], 3, ['c', 'a'], 'x.csv') // [2, 0]
 * @throws DataError for an unknown name (listing the available ones), a name when the file has
 *   no header, or a position out of range.
 */
export function resolveColumns(columns: readonly string[] | null, width: number, wanted: readonly ColumnRef[], file: string): number[] {
  return wanted.map((ref) => {
    if (typeof ref === 'number') {
      if (!Number.isInteger(ref) || ref < 0 || ref >= width) {
        throw new DataError(file, 0, 0, `column position ${ref} is out of range: the table has ${width} columns (0..${width - 1})`);
      }
      return ref;
    }
    if (columns === null) {
      throw new DataError(file, 0, 0, `column "${ref}" asked for by name, but the file has no header row or keys; give positions instead`);
    }
    const index = columns.indexOf(ref);
    if (index < 0) {
      throw new DataError(file, 1, 0, `no column named "${ref}"; available: ${shownNames(columns)}`);
    }
    return index;
  });
}

/**
 * A new table with only the wanted columns, in the order asked (so a file whose columns are in
 * another order still lines up with a model's feature names).
 *
 * @example selectColumns(table, ['temp', 'humidity'], 'data.csv').data // rows x 2
 */
export function selectColumns(table: LoadedTable, wanted: readonly ColumnRef[], file: string): LoadedTable & { indices: number[] } {
  const indices = resolveColumns(table.columns, table.width, wanted, file);
  const width = indices.length;
  const data = new Float64Array(table.rows * width);
  for (let r = 0; r < table.rows; r++) {
    const from = r * table.width;
    const to = r * width;
    for (let k = 0; k < width; k++) data[to + k] = table.data[from + indices[k]];
  }
  const text = new Map<number, string[]>();
  indices.forEach((source, k) => {
    const cells = table.text.get(source);
    if (cells) text.set(k, cells);
  });
  const names = table.columns;
  const columns = names === null ? null : indices.map((i) => names[i]);
  return { columns, rows: table.rows, width, data, text, indices };
}

/** A 0/1 flag per column position, set for `positions`. */
export function columnMask(width: number, positions: readonly number[]): Uint8Array {
  const mask = new Uint8Array(width);
  for (const p of positions) mask[p] = 1;
  return mask;
}
