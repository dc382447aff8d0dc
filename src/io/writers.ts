/**
 * Table writers, chosen by extension: CSV (a header row, then numbers), JSONL (one object per
 * row keyed by column name, or one array per row) and NPY (a float32 `rows x width` array).
 * Each writes to a temporary file renamed into place on close; each `write` resolves once its
 * bytes are handed to the OS, so awaiting it keeps memory bounded.
 */
import { extname } from 'node:path';
import { DataError, ShapeError } from '../errors.js';
import { openAtomicFile, type AtomicFile } from './atomic-file.js';
import { openNpyRowWriter, type NpyWriteDtype } from './npy.js';
import { formatFloat32, formatFloat64 } from './numbers.js';
import type { TableFormat } from './table-types.js';

export interface TableWriter {
  /** Appends `rows x columns.length` values, row-major. */
  write(rows: number, data: Float32Array | Float64Array): Promise<void>;
  /** Finishes the file and moves it into place. */
  close(): Promise<void>;
  /** Drops the partial file; the target path is left as it was. */
  abort(): Promise<void>;
}

export interface TableWriterOptions {
  format?: TableFormat;
  /**
   * JSONL rows as objects keyed by column name (the default: a reader needs no side file to
   * know what each number is) or as bare arrays (smaller).
   */
  jsonlRows?: 'objects' | 'arrays';
  /** NPY element type (default '<f4', the precision the engine computes in). */
  npyDtype?: NpyWriteDtype;
}

const BY_EXTENSION: Record<string, TableFormat> = { '.csv': 'csv', '.jsonl': 'jsonl', '.npy': 'npy' };

// Text is handed to the file in pieces of about this size: fewer system calls, bounded memory.
const FLUSH_CHARS = 256 * 1024;

/**
 * Opens a table writer; the format follows the extension unless given.
 * Numbers are printed as the shortest text that reads back as the same value: float32 data as
 * float32, float64 data as float64. Non-finite values print as NaN / Infinity in CSV (readers
 * here refuse them, on purpose) and as null in JSONL, which has no NaN.
 *
 * @example
 * const w = await openTableWriter('scores.csv', ['p_good', 'p_bad']);
 * await w.write(2, new Float32Array([0.9, 0.1, 0.2, 0.8]));
 * await w.close();
 * @throws DataError for an unknown extension, repeated or empty column names, or a file that
 *   cannot be created.
 */
export async function openTableWriter(path: string, columns: readonly string[], opts: TableWriterOptions = {}): Promise<TableWriter> {
  const format = opts.format ?? BY_EXTENSION[extname(path).toLowerCase()];
  if (!format) {
    throw new DataError(path, 0, 0, `unknown output extension "${extname(path)}"; supported: ${Object.keys(BY_EXTENSION).join(', ')}`);
  }
  if (columns.length === 0) throw new DataError(path, 0, 0, 'an output table needs at least one column');
  columns.forEach((name, i) => {
    if (name === '') throw new DataError(path, 0, i + 1, 'empty output column name');
    if (columns.indexOf(name) < i) throw new DataError(path, 0, i + 1, `output column name "${name}" is repeated`);
  });
  const width = columns.length;
  const checkShape = (rows: number, data: Float32Array | Float64Array): void => {
    if (!Number.isInteger(rows) || rows < 0 || data.length !== rows * width) {
      throw new ShapeError('rows to write', [rows, width], [data.length], path);
    }
  };

  if (format === 'npy') {
    const npy = await openNpyRowWriter(path, width, opts.npyDtype ?? '<f4');
    return {
      async write(rows, data) {
        checkShape(rows, data);
        await npy.write(rows, data);
      },
      close: () => npy.close(),
      abort: () => npy.abort(),
    };
  }

  const file = await openAtomicFile(path);
  const rowText = format === 'csv' ? csvRow : jsonlRowMaker(columns, opts.jsonlRows ?? 'objects');
  try {
    if (format === 'csv') await file.append(columns.map(csvQuote).join(',') + '\n');
  } catch (error) {
    await file.abort();
    throw error;
  }
  return textWriter(file, width, checkShape, rowText);
}

type RowText = (values: ArrayLike<number>, from: number, width: number, print: (v: number) => string) => string;

function textWriter(file: AtomicFile, width: number, checkShape: (rows: number, data: Float32Array | Float64Array) => void, rowText: RowText): TableWriter {
  return {
    async write(rows, data) {
      checkShape(rows, data);
      const print = data instanceof Float32Array ? formatFloat32 : formatFloat64;
      let piece = '';
      for (let r = 0; r < rows; r++) {
        piece += rowText(data, r * width, width, print);
        if (piece.length >= FLUSH_CHARS) {
          await file.append(piece);
          piece = '';
        }
      }
      if (piece.length > 0) await file.append(piece);
    },
    close: () => file.commit(),
    abort: () => file.abort(),
  };
}

const csvRow: RowText = (values, from, width, print) => {
  let line = '';
  for (let c = 0; c < width; c++) line += (c > 0 ? ',' : '') + print(values[from + c]);
  return line + '\n';
};

function jsonlRowMaker(columns: readonly string[], rows: 'objects' | 'arrays'): RowText {
  // JSON has no NaN or Infinity: those become null.
  const json = (v: number, print: (v: number) => string): string => (Number.isFinite(v) ? print(v) : 'null');
  if (rows === 'arrays') {
    return (values, from, width, print) => {
      let line = '[';
      for (let c = 0; c < width; c++) line += (c > 0 ? ',' : '') + json(values[from + c], print);
      return line + ']\n';
    };
  }
  const keys = columns.map((name) => JSON.stringify(name) + ':');
  return (values, from, width, print) => {
    let line = '{';
    for (let c = 0; c < width; c++) line += (c > 0 ? ',' : '') + keys[c] + json(values[from + c], print);
    return line + '}\n';
  };
}

/** RFC 4180: quote a name holding a comma, quote or line break (and keep edge spaces visible). */
export function csvQuote(name: string): string {
  return /[",\r\n]|^\s|\s$/.test(name) ? `"${name.replace(/"/g, '""')}"` : name;
}
