/**
 * Streaming CSV tables (RFC 4180): the file is read in 64 KiB pieces and handed out in row
 * chunks, so millions of rows never sit in memory at once.
 */
import { BatchQueue, fileSize } from './batch-queue.js';
import { createReadStream } from 'node:fs';
import { DataError } from '../errors.js';
import { ChunkBuilder } from './chunk-builder.js';
import { columnMask, resolveColumns } from './columns.js';
import { CsvTokenizer, type CsvRecord } from './csv-tokenizer.js';
import { asDataError, shownCell } from './file-errors.js';
import { describeBadNumber, OUT_OF_FLOAT32, overflowsFloat32, parseNumberCell } from './numbers.js';
import { rowsPerChunk, type CsvSeparator, type TableChunk, type TableOptions, type TableReader } from './table-types.js';

const READ_PIECE_BYTES = 64 * 1024;

interface ByteCounter {
  bytesRead: number;
  /** The separator in use, once the first piece is read. */
  separator?: CsvSeparator;
}

/**
 * The records of a CSV file, a batch per piece read (batches, not single records, keep the
 * per-await cost off the per-row path). `counter.bytesRead` follows the read. The separator
 * is sniffed from the first line unless given (see `sniffSeparator`).
 *
 * @example for await (const batch of readCsvBatches('a.csv')) for (const r of batch) use(r.cells);
 */
export async function* readCsvBatches(path: string, counter: ByteCounter = { bytesRead: 0 }, separator?: CsvSeparator): AsyncGenerator<CsvRecord[]> {
  const stream = createReadStream(path, { encoding: 'utf8', highWaterMark: READ_PIECE_BYTES });
  let tokenizer: CsvTokenizer | null = null;
  try {
    for await (const piece of stream as AsyncIterable<string>) {
      counter.bytesRead = stream.bytesRead;
      if (!tokenizer) {
        counter.separator = separator ?? sniffSeparator(piece);
        tokenizer = new CsvTokenizer(path, counter.separator);
      }
      const batch = tokenizer.push(piece);
      if (batch.length > 0) yield batch;
    }
    const last = tokenizer?.end() ?? [];
    if (last.length > 0) yield last;
  } catch (error) {
    throw asDataError(path, error);
  } finally {
    stream.destroy();
  }
}

/**
 * The separator of a CSV file, from its first line (outside quotes): a comma if there is one,
 * else a semicolon (as spreadsheets write CSV where the comma is the decimal mark), else a tab,
 * else a comma (a one-column file).
 *
 * @example sniffSeparator('a;b;c\n1,5;2;3\n') // ';'
 */
export function sniffSeparator(text: string): CsvSeparator {
  let commas = 0;
  let semicolons = 0;
  let tabs = 0;
  let quoted = false;
  for (let i = 0; i < text.length; i++) {
    const c = text[i];
    if (c === '"') quoted = !quoted;
    else if (quoted) continue;
    else if (c === '\n' || c === '\r') break;
    else if (c === ',') commas++;
    else if (c === ';') semicolons++;
    else if (c === '\t') tabs++;
  }
  if (commas > 0) return ',';
  if (semicolons > 0) return ';';
  if (tabs > 0) return '\t';
  return ',';
}

/**
 * Opens a CSV file as a table: reads the header (if any) and the first row, so an empty or
 * header-only file is refused here rather than mid-way. Line numbers in errors are 1-based and
 * point at the row's first line; columns are 1-based cell positions.
 *
 * @example
 * const t = await openCsvTable('data.csv', { chunkRows: 1024 });
 * for await (const c of t.chunks()) use(c.rows, c.data);
 * @throws DataError "file is empty", "no data rows", bad cells, ragged rows.
 */
export async function openCsvTable(path: string, opts: TableOptions = {}): Promise<TableReader> {
  const bytesTotal = await fileSize(path);
  const counter: ByteCounter = { bytesRead: 0 };
  const records = new BatchQueue(readCsvBatches(path, counter, opts.separator));
  let head: CsvHead;
  try {
    head = await readHead(path, records, opts, counter);
  } catch (error) {
    await records.close();
    throw error;
  }
  const { columns, width, textColumns, skipped } = head;
  let pendingRow: CsvRecord | null = head.firstRow;
  const chunkRows = rowsPerChunk(width, opts.chunkRows);
  let closed = false;
  let started = false;

  async function* chunks(): AsyncGenerator<TableChunk> {
    if (started) throw new Error('CSV table chunks() can be iterated only once');
    started = true;
    const builder = new ChunkBuilder(width, chunkRows, textColumns);
    // 0: a number, 1: text, 2: skipped (never parsed).
    const use = new Uint8Array(width);
    for (const c of textColumns) use[c] = 1;
    skipped.forEach((flag, c) => {
      if (flag) use[c] = 2;
    });
    const addRow = (record: CsvRecord): void => {
      const cells = record.cells;
      if (cells.length !== width) throw raggedRow(path, record, width, columns !== null);
      const offset = builder.startRow(record.line);
      const values = builder.values;
      for (let c = 0; c < width; c++) {
        const kind = use[c];
        if (kind === 2) {
          values[offset + c] = Number.NaN;
          continue;
        }
        const cell = cells[c];
        if (kind === 1) {
          if (cell.trim() === '') throw badCell(path, record.line, c, cell, columns, 'is empty');
          builder.setText(c, cell);
          continue;
        }
        const value = parseNumberCell(cell);
        if (value === undefined) throw badCell(path, record.line, c, cell, columns, whyNotNumber(cell, head.separator));
        if (overflowsFloat32(value)) throw badCell(path, record.line, c, cell, columns, OUT_OF_FLOAT32);
        values[offset + c] = value;
      }
    };
    try {
      if (pendingRow) addRow(pendingRow);
      pendingRow = null;
      while (!closed) {
        if (builder.full) yield builder.take()!;
        const next = records.nextReady() ?? (await records.next());
        if (next === null) break;
        addRow(next);
      }
      const last = builder.take();
      if (last && !closed) yield last;
    } finally {
      await records.close();
    }
  }

  return {
    columns,
    width,
    textColumns,
    get bytesRead() {
      return counter.bytesRead;
    },
    bytesTotal,
    chunks,
    async close() {
      closed = true;
      await records.close();
    },
  };
}

interface CsvHead {
  columns: string[] | null;
  width: number;
  textColumns: number[];
  /** 1 for a column never read: asked to skip, or unnamed in the header. */
  skipped: Uint8Array;
  separator: CsvSeparator;
  firstRow: CsvRecord;
}

async function readHead(path: string, records: BatchQueue<CsvRecord>, opts: TableOptions, counter: ByteCounter): Promise<CsvHead> {
  const first = await records.next();
  if (first === null) throw new DataError(path, 0, 0, 'file is empty');
  const separator = counter.separator ?? ',';
  // Text and skipped columns given by position are known before the header; by name only after it.
  const positional = [...(opts.textColumns ?? []), ...(opts.skipColumns ?? [])].filter((c): c is number => typeof c === 'number');
  const isHeader = opts.header ?? first.cells.some((cell, i) => !positional.includes(i) && parseNumberCell(cell) === undefined);
  if (!isHeader) {
    const width = first.cells.length;
    const skipped = columnMask(width, resolveColumns(null, width, opts.skipColumns ?? [], path));
    return { columns: null, width, textColumns: resolveColumns(null, width, opts.textColumns ?? [], path), skipped, separator, firstRow: first };
  }
  const columns = headerNames(path, first);
  const firstRow = await records.next();
  if (firstRow === null) throw new DataError(path, first.line, 0, 'no data rows (the file holds only a header)');
  const width = columns.length;
  const textColumns = resolveColumns(columns, width, opts.textColumns ?? [], path);
  const skipped = columnMask(width, resolveColumns(columns, width, opts.skipColumns ?? [], path));
  // An unnamed column (a dataframe's index written first, or a comma ending every line) is never read.
  columns.forEach((name, c) => {
    if (name === '' && !textColumns.includes(c)) skipped[c] = 1;
  });
  return { columns, width, textColumns, skipped, separator, firstRow };
}

function headerNames(path: string, record: CsvRecord): string[] {
  // Names are trimmed so "a, b" matches a model feature called "b". Empty names are unnamed
  // columns (never read), so they may repeat.
  const names = record.cells.map((c) => c.trim());
  names.forEach((name, i) => {
    if (name === '') return;
    const earlier = names.indexOf(name);
    if (earlier < i) {
      throw new DataError(path, record.line, i + 1, `column name ${shownCell(name)} repeats column ${earlier + 1}`);
    }
  });
  return names;
}

/** Why a cell is not a number, with a hint when a semicolon file writes decimal commas ("1,5"). */
function whyNotNumber(cell: string, separator: CsvSeparator): string {
  if (separator === ';' && /^\s*[+-]?\d*,\d+\s*$/.test(cell)) {
    return 'is not a number (a decimal comma? tendon reads numbers with a decimal point, like 1.5)';
  }
  return describeBadNumber(cell);
}

function raggedRow(path: string, record: CsvRecord, width: number, hasHeader: boolean): DataError {
  const actual = record.cells.length;
  const source = hasHeader ? 'the header has' : 'the first row has';
  // Point at the first missing cell, or at the first extra one.
  return new DataError(path, record.line, Math.min(actual, width) + 1, `row has ${actual} cells, expected ${width} (${source} ${width})`);
}

function badCell(path: string, line: number, column: number, cell: string, columns: readonly string[] | null, why: string): DataError {
  const name = columns && columns[column] !== '' ? `"${columns[column]}"` : String(column + 1);
  return new DataError(path, line, column + 1, `cell ${shownCell(cell)} in column ${name} ${why}`);
}
