/**
 * One request body, whatever its format, into rows x inputs float32 values. Pure and free of
 * Node's HTTP types, so the parse workers run the very same code as the main thread.
 */
import type { BodyFormat } from './http-formats.js';
import { parseCsvBody } from './http-csv.js';
import { parseNpyBody } from './http-npy.js';
import { parseScoreBody, type ScoreShape } from './http-rows.js';
import { parseNumberRows } from './http-rows-fast.js';

/**
 * @example parseRequestBody('json', Buffer.from('{"rows": [[1, 2]]}'), { inputs: 2, features: null, maxRows: 10 }) // { rows: 1, x: Float32Array [1, 2] }
 * @throws HttpProblem with the status and message the format's parser chose.
 */
export function parseRequestBody(format: BodyFormat, bytes: Uint8Array, shape: ScoreShape): { rows: number; x: Float32Array } {
  switch (format) {
    case 'npy':
      return parseNpyBody(bytes, shape);
    case 'csv':
      return parseCsvBody(utf8(bytes), shape);
    case 'json':
      // Plain number rows take the fast path; anything else, or anything wrong, the general parser.
      return parseNumberRows(bytes, shape.inputs, shape.maxRows) ?? parseScoreBody(utf8(bytes), shape);
  }
}

function utf8(bytes: Uint8Array): string {
  return Buffer.from(bytes.buffer, bytes.byteOffset, bytes.byteLength).toString('utf8');
}
