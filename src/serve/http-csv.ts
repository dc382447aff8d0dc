/**
 * CSV score bodies: one row per record, the header optional. With a header and a model that
 * has feature names, columns are matched by name as `tendon score` matches a file's columns
 * (any order, extra columns ignored); otherwise each record must hold the model's inputs in
 * order. The CSV answer holds one line per row under the output names.
 */
import { DataError } from '../errors.js';
import { CsvTokenizer, type CsvRecord } from '../io/csv-tokenizer.js';
import { shownCell, shownNames } from '../io/file-errors.js';
import { describeBadNumber, formatFloat32, parseNumberCell } from '../io/numbers.js';
import { csvQuote } from '../io/writers.js';
import { HttpProblem } from './http-problem.js';
import type { ScoreShape } from './http-rows.js';

/** Names the body in messages: "body:3:2: ..." is line 3, column 2. */
const BODY = 'body';

/**
 * Rows x inputs float32 values from CSV text.
 * @example parseCsvBody('a,b\n1,2\n', { inputs: 2, features: ['b', 'a'], maxRows: 10 }) // { rows: 1, x: Float32Array [2, 1] }
 * @throws HttpProblem 400 (empty, ragged, missing feature columns, a cell that is not a finite float32) or 413 (rows past the limit).
 */
export function parseCsvBody(text: string, shape: ScoreShape): { rows: number; x: Float32Array } {
  let records: CsvRecord[];
  try {
    const tokenizer = new CsvTokenizer(BODY);
    records = tokenizer.push(text);
    records.push(...tokenizer.end());
  } catch (error) {
    if (error instanceof DataError) throw bad(error.message);
    throw error;
  }
  if (records.length === 0) throw bad('body: empty; send at least one CSV row');
  const first = records[0]!;
  const isHeader = first.cells.some((cell) => parseNumberCell(cell) === undefined);
  const dataRecords = isHeader ? records.slice(1) : records;
  if (dataRecords.length === 0) throw bad(`body: no data rows (the body holds only a header)`);
  if (dataRecords.length > shape.maxRows) throw new HttpProblem(413, `body: ${dataRecords.length} rows pass the limit of ${shape.maxRows} per request`);
  const width = first.cells.length;
  const columns = isHeader ? first.cells.map((c) => c.trim()) : null;
  const picks = inputPicks(columns, width, shape, first.line);
  const n = shape.inputs;
  const x = new Float32Array(dataRecords.length * n);
  dataRecords.forEach((record, r) => {
    if (record.cells.length !== width) {
      throw bad(
        `${BODY}:${record.line}: row has ${record.cells.length} cells, expected ${width} (${isHeader ? 'the header has' : 'the first row has'} ${width})`,
      );
    }
    for (let k = 0; k < n; k++) {
      const c = picks[k]!;
      const cell = record.cells[c]!;
      const where = `${BODY}:${record.line}:${c + 1}: cell ${shownCell(cell)}${columns ? ` in column "${columns[c]}"` : ''}`;
      const value = parseNumberCell(cell);
      if (value === undefined) throw bad(`${where} ${describeBadNumber(cell)}`);
      const f = Math.fround(value);
      if (!Number.isFinite(f)) throw bad(`${where} is not a finite float32 number`);
      x[r * n + k] = f;
    }
  });
  return { rows: dataRecords.length, x };
}

/** Which cell of a record feeds each model input, in the model's order. */
function inputPicks(columns: string[] | null, width: number, shape: ScoreShape, headerLine: number): number[] {
  const features = shape.features;
  if (features && columns) {
    const missing = features.filter((name) => !columns.includes(name));
    if (missing.length === 0) return features.map((name) => columns.indexOf(name));
    // Some names but not all would feed one feature's values into another's input: refuse.
    if (missing.length < features.length || width !== shape.inputs) {
      throw bad(
        `${BODY}:${headerLine}: missing feature column${missing.length > 1 ? 's' : ''} ${shownNames(missing)} (the header has: ${shownNames(columns)})`,
      );
    }
  }
  if (width !== shape.inputs) {
    throw bad(`${BODY}:${headerLine}: has ${width} columns, but the model takes ${shape.inputs} inputs${features ? ` (${features.join(', ')})` : ''}`);
  }
  return Array.from({ length: shape.inputs }, (_, i) => i);
}

/**
 * The CSV answer: a header of output names, then one line of float32 values per row.
 * @example csvAnswer(Float32Array.of(0.25, 0.75), 1, ['no', 'yes']) // 'no,yes\n0.25,0.75\n'
 */
export function csvAnswer(values: Float32Array, rows: number, names: readonly string[]): string {
  const width = names.length;
  const lines = [names.map(csvQuote).join(',')];
  for (let r = 0; r < rows; r++) {
    const cells: string[] = new Array(width);
    for (let c = 0; c < width; c++) cells[c] = formatFloat32(values[r * width + c]!);
    lines.push(cells.join(','));
  }
  return lines.join('\n') + '\n';
}

function bad(message: string): HttpProblem {
  return new HttpProblem(400, message);
}
