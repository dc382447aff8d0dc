/**
 * One way in for tables, whatever the format: the CLI and the training code call these.
 */
import { extname } from 'node:path';
import { DataError } from '../errors.js';
import { openCsvTable } from './csv.js';
import { openJsonlTable } from './jsonl.js';
import { openNpyTable } from './npy.js';
import { TABLE_FORMATS, type LoadedTable, type TableFormat, type TableOptions, type TableReader } from './table-types.js';

// A .tsv file is CSV with tabs (RFC 4180 rules for quotes); a .csv file may use commas,
// semicolons or tabs (sniffed from its first line).
const BY_EXTENSION: Record<string, TableFormat> = { '.csv': 'csv', '.tsv': 'csv', '.jsonl': 'jsonl', '.npy': 'npy' };

/** The format a path names by its extension. @throws DataError for an unknown extension. */
export function tableFormatOf(path: string): TableFormat {
  const format = BY_EXTENSION[extname(path).toLowerCase()];
  if (!format) {
    throw new DataError(
      path,
      0,
      0,
      `unknown data file extension "${extname(path)}"; supported: ${Object.keys(BY_EXTENSION).join(', ')} (rename the file to one of these)`,
    );
  }
  return format;
}

/**
 * Opens a table to read in chunks; the format follows the extension unless given.
 *
 * @example
 * const table = await openTable('rows.csv', { chunkRows: 2048 });
 * try { for await (const c of table.chunks()) train(c.data, c.rows); } finally { await table.close(); }
 * @throws DataError for a missing file, an unknown format, an empty file, or bad rows (those
 *   while iterating).
 */
export async function openTable(path: string, opts: TableOptions = {}): Promise<TableReader> {
  const format = opts.format ?? tableFormatOf(path);
  if (opts.chunkRows !== undefined && (!Number.isInteger(opts.chunkRows) || opts.chunkRows < 1)) {
    throw new RangeError(`openTable: chunkRows must be a positive integer, got ${opts.chunkRows}`);
  }
  switch (format) {
    case 'csv':
      return openCsvTable(path, extname(path).toLowerCase() === '.tsv' && !opts.separator ? { ...opts, separator: '\t' } : opts);
    case 'jsonl':
      return openJsonlTable(path, opts);
    case 'npy':
      return openNpyTable(path, opts);
    default:
      throw new DataError(path, 0, 0, `unknown data format "${String(format)}"; supported: ${TABLE_FORMATS.join(', ')}`);
  }
}

/**
 * Reads a whole table into memory.
 *
 * @example
 * const t = await readTable('wine.csv', { textColumns: ['quality'] });
 * t.text.get(t.columns!.indexOf('quality')) // ['good', 'bad', ...]
 */
export async function readTable(path: string, opts: TableOptions = {}): Promise<LoadedTable> {
  const reader = await openTable(path, opts);
  const parts: Float64Array[] = [];
  const text = new Map<number, string[]>(reader.textColumns.map((c) => [c, []]));
  let rows = 0;
  try {
    for await (const chunk of reader.chunks()) {
      parts.push(chunk.data);
      rows += chunk.rows;
      chunk.text?.forEach((cells, column) => {
        const all = text.get(column);
        if (all) for (const cell of cells) all.push(cell);
      });
    }
  } finally {
    await reader.close();
  }
  const data = new Float64Array(rows * reader.width);
  let at = 0;
  for (const part of parts) {
    data.set(part, at);
    at += part.length;
  }
  return { columns: reader.columns, rows, width: reader.width, data, text };
}
