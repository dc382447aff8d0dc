/**
 * JSONL tables: one JSON value per line, either an array of numbers or an object keyed by
 * column names (every line the same kind). The first line's keys are the columns; keys other
 * lines add are ignored, and a column's key may be missing on a line only if that column is
 * skipped.
 * Blank lines are skipped. Errors name the 1-based line; a JSON syntax error names the
 * 1-based character column from the parser when it gives one, else 1; a bad value names the
 * 1-based column position in the table.
 */
import { BatchQueue, fileSize } from './batch-queue.js';
import { firstSyntaxError } from './json-text.js';
import { DataError } from '../errors.js';
import { ChunkBuilder } from './chunk-builder.js';
import { resolveColumns } from './columns.js';
import { shownCell } from './file-errors.js';
import { OUT_OF_FLOAT32, overflowsFloat32 } from './numbers.js';
import { readLineBatches, type TextLine } from './lines.js';
import { rowsPerChunk, type TableChunk, type TableOptions, type TableReader } from './table-types.js';

type Row = unknown[] | Record<string, unknown>;

/**
 * Parses one JSONL line, turning a syntax error into a DataError at the line and column.
 *
 * @example parseJsonLine('a.jsonl', { text: '[1, 2]', line: 3 }) // [1, 2]
 */
export function parseJsonLine(path: string, line: TextLine): unknown {
  try {
    return JSON.parse(line.text);
  } catch {
    // V8 does not always say where a syntax error is; the scanner finds the first bad character.
    const column = firstSyntaxError(line.text) + 1;
    const found = column <= line.text.length ? `unexpected ${JSON.stringify(line.text[column - 1])}` : 'unexpected end of line';
    throw new DataError(path, line.line, column, `not valid JSON (${found})`);
  }
}

/**
 * Opens a JSONL file as a table; reads the first non-blank line to learn the columns.
 *
 * @example
 * const t = await openJsonlTable('rows.jsonl');
 * t.columns // ['temp', 'humidity'] for lines like {"temp": 21.5, "humidity": 0.4}
 * @throws DataError "file is empty", bad JSON, lines of the wrong kind, a missing key of a column that is read.
 */
export async function openJsonlTable(path: string, opts: TableOptions = {}): Promise<TableReader> {
  const bytesTotal = await fileSize(path);
  const counter = { bytesRead: 0 };
  const lines = new BatchQueue(readLineBatches(path, counter), (line) => line.text.trim() !== '');
  let head: JsonlHead;
  try {
    head = await readHead(path, lines, opts);
  } catch (error) {
    await lines.close();
    throw error;
  }
  const { firstLine, firstValue, columns, width, textColumns } = head;
  const chunkRows = rowsPerChunk(width, opts.chunkRows);
  // 0: a number, 1: text, 2: skipped (any value, or no key at all).
  const use = new Uint8Array(width);
  for (const c of textColumns) use[c] = 1;
  try {
    for (const c of resolveColumns(columns, width, opts.skipColumns ?? [], path)) use[c] = 2;
  } catch (error) {
    await lines.close();
    throw error;
  }
  let closed = false;
  let started = false;

  const addRow = makeRowAdder(path, columns, width, use);

  async function* chunks(): AsyncGenerator<TableChunk> {
    if (started) throw new Error('JSONL table chunks() can be iterated only once');
    started = true;
    const builder = new ChunkBuilder(width, chunkRows, textColumns);
    try {
      addRow(builder, firstLine, firstValue);
      while (!closed) {
        if (builder.full) yield builder.take()!;
        const line = await lines.next();
        if (line === null) break;
        addRow(builder, line, rowShape(path, line, parseJsonLine(path, line)));
      }
      const last = builder.take();
      if (last && !closed) yield last;
    } finally {
      await lines.close();
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
      await lines.close();
    },
  };
}

/** What the first non-blank line settles: the columns (null for arrays), the width, the text columns. */
interface JsonlHead {
  firstLine: TextLine;
  firstValue: Row;
  columns: string[] | null;
  width: number;
  textColumns: number[];
}

async function readHead(path: string, lines: BatchQueue<TextLine>, opts: TableOptions): Promise<JsonlHead> {
  const head = await lines.next();
  if (head === null) throw new DataError(path, 0, 0, 'file is empty');
  const firstValue = rowShape(path, head, parseJsonLine(path, head));
  const columns = Array.isArray(firstValue) ? null : Object.keys(firstValue);
  const width = columns ? columns.length : (firstValue as unknown[]).length;
  if (width === 0) throw new DataError(path, head.line, 1, 'the first row has no values');
  const textColumns = resolveColumns(columns, width, opts.textColumns ?? [], path);
  return { firstLine: head, firstValue, columns, width, textColumns };
}

/**
 * The reader of one row into a chunk: checks the row has the first line's shape and each read
 * cell is a finite number (or a class name), and marks skipped cells NaN.
 * `use` per column - 0: a number, 1: text, 2: skipped (any value, or no key at all).
 */
function makeRowAdder(path: string, columns: string[] | null, width: number, use: Uint8Array): (builder: ChunkBuilder, line: TextLine, value: Row) => void {
  return (builder: ChunkBuilder, line: TextLine, value: Row): void => {
    const offset = builder.startRow(line.line);
    const values = builder.values;
    if (columns === null) {
      if (!Array.isArray(value)) throw new DataError(path, line.line, 1, 'expected an array like the first line, found an object');
      if (value.length !== width) {
        throw new DataError(
          path,
          line.line,
          Math.min(value.length, width) + 1,
          `row has ${value.length} values, expected ${width} (the first line has ${width})`,
        );
      }
    } else if (Array.isArray(value)) {
      throw new DataError(path, line.line, 1, 'expected an object like the first line, found an array');
    }
    // Keys the first line does not have are ignored (extra fields of any type).
    for (let c = 0; c < width; c++) {
      const kind = use[c];
      if (kind === 2) {
        values[offset + c] = Number.NaN;
        continue;
      }
      let cell: unknown;
      if (columns === null) {
        cell = (value as unknown[])[c];
      } else {
        const name = columns[c];
        if (!Object.hasOwn(value, name)) throw new DataError(path, line.line, c + 1, `key "${name}" is missing (the first line has it)`);
        cell = (value as Record<string, unknown>)[name];
      }
      const name = columns ? `"${columns[c]}"` : String(c + 1);
      if (kind === 1) {
        // A class cell: a name, or a number read as its text ("2" for 2 or 2.0).
        const text = typeof cell === 'number' && Number.isFinite(cell) ? String(cell) : cell;
        if (typeof text !== 'string' || text.trim() === '') {
          throw new DataError(path, line.line, c + 1, `value ${shownValue(cell)} in column ${name} is neither a non-empty string nor a number`);
        }
        builder.setText(c, text);
      } else if (typeof cell === 'number' && Number.isFinite(cell)) {
        if (overflowsFloat32(cell)) throw new DataError(path, line.line, c + 1, `value ${cell} in column ${name} ${OUT_OF_FLOAT32}`);
        values[offset + c] = cell;
      } else {
        throw new DataError(path, line.line, c + 1, `value ${shownValue(cell)} in column ${name} is not a finite number`);
      }
    }
  };
}

function rowShape(path: string, line: TextLine, value: unknown): Row {
  if (Array.isArray(value)) return value;
  if (typeof value === 'object' && value !== null) return value as Record<string, unknown>;
  throw new DataError(path, line.line, 1, `each line must be an array of numbers or an object of numbers, found ${shownValue(value)}`);
}

/** A JSON value for an error message, cut when long (a 10 MB string stays a readable line). */
function shownValue(value: unknown): string {
  if (typeof value === 'string') return shownCell(value);
  const text = JSON.stringify(value) ?? String(value);
  return text.length <= 64 ? text : `${text.slice(0, 64)}… (${text.length} characters of JSON)`;
}
