/**
 * The score request body: `{"rows": [...]}` where each row is an array of numbers in the
 * model's input order, or an object keyed by the model's feature names. Every refusal names
 * the row and the field, e.g. `rows[3].humidity_pct: not a number (got "high")`.
 */
import { HttpProblem } from './http-problem.js';

export interface ScoreShape {
  readonly inputs: number;
  readonly features: readonly string[] | null;
  /** Most rows one request may carry. */
  readonly maxRows: number;
}

/**
 * Parse and check a score request body into rows x inputs float32 values.
 * @example parseScoreBody('{"rows": [[1, 2]]}', { inputs: 2, features: null, maxRows: 100 }) // { rows: 1, x: Float32Array [1, 2] }
 * @throws HttpProblem 400 (malformed, wrong width, non-number, unknown feature) or 413 (too many rows).
 */
export function parseScoreBody(text: string, shape: ScoreShape): { rows: number; x: Float32Array } {
  let body: unknown;
  try {
    body = JSON.parse(text);
  } catch (error) {
    throw bad(`body: not valid JSON (${error instanceof Error ? error.message : String(error)})`);
  }
  if (typeof body !== 'object' || body === null || Array.isArray(body)) {
    throw bad(`body: expected an object like {"rows": [[...], ...]}, got ${kindOf(body)}`);
  }
  const rowsValue: unknown = Object.hasOwn(body, 'rows') ? (body as { rows: unknown }).rows : undefined;
  if (!Array.isArray(rowsValue)) throw bad(`rows: expected an array of rows, got ${kindOf(rowsValue)}`);
  if (rowsValue.length === 0) throw bad('rows: empty; send at least one row');
  if (rowsValue.length > shape.maxRows) throw new HttpProblem(413, `rows: ${rowsValue.length} rows pass the limit of ${shape.maxRows} per request`);
  const n = shape.inputs;
  const x = new Float32Array(rowsValue.length * n);
  const index = shape.features ? new Map(shape.features.map((name, i) => [name, i])) : null;
  rowsValue.forEach((row: unknown, r) => {
    if (Array.isArray(row)) {
      if (row.length !== n) throw bad(`rows[${r}]: expected ${n} numbers, got ${row.length}`);
      row.forEach((v: unknown, c) => {
        x[r * n + c] = checkNumber(v, `rows[${r}][${c}]${shape.features ? ` (${shape.features[c]})` : ''}`);
      });
      return;
    }
    if (typeof row !== 'object' || row === null)
      throw bad(`rows[${r}]: expected an array of ${n} numbers or an object keyed by feature name, got ${kindOf(row)}`);
    if (!index || !shape.features) throw bad(`rows[${r}]: the model has no feature names; send each row as an array of ${n} numbers`);
    const seen = new Uint8Array(n);
    for (const [key, v] of Object.entries(row)) {
      const c = index.get(key);
      if (c === undefined) throw bad(`rows[${r}].${printable(key)}: unknown feature (the model's features: ${shape.features.join(', ')})`);
      x[r * n + c] = checkNumber(v, `rows[${r}].${key}`);
      seen[c] = 1;
    }
    const missing = shape.features.filter((_, c) => seen[c] === 0);
    if (missing.length > 0) throw bad(`rows[${r}]: missing feature${missing.length > 1 ? 's' : ''} ${missing.join(', ')}`);
  });
  return { rows: rowsValue.length, x };
}

function checkNumber(v: unknown, where: string): number {
  if (typeof v !== 'number') throw bad(`${where}: not a number (got ${kindOf(v)})`);
  // JSON cannot spell NaN or Infinity, but 1e999 parses to Infinity, and 1e39 overflows float32.
  const f = Math.fround(v);
  if (!Number.isFinite(f)) throw bad(`${where}: ${v} is not a finite float32 number`);
  return f;
}

function bad(message: string): HttpProblem {
  return new HttpProblem(400, message);
}

function kindOf(v: unknown): string {
  if (v === null) return 'null';
  if (Array.isArray(v)) return 'an array';
  if (typeof v === 'string') return `"${printable(v)}"`;
  if (typeof v === 'object') return 'an object';
  return typeof v === 'undefined' ? 'nothing' : `${typeof v} ${String(v)}`;
}

/** Client text echoed in a message: short, one line. */
function printable(s: string): string {
  // eslint-disable-next-line no-control-regex -- control characters are what this replaces
  const one = s.replace(/[\u0000-\u001f\u007f]/g, '?');
  return one.length > 40 ? `${one.slice(0, 40)}...` : one;
}
