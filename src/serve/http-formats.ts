/**
 * The body types the score route reads and writes, and which one a request asks for.
 * JSON is the default both ways; NPY (NumPy NEP 1) and CSV skip the text-to-number work
 * that dominates JSON serving.
 */
import type { IncomingMessage } from 'node:http';
import { HttpProblem } from './http-problem.js';

export const BODY_TYPES = {
  json: 'application/json',
  npy: 'application/x-npy',
  csv: 'text/csv',
} as const;

export type BodyFormat = keyof typeof BODY_TYPES;

/** What the score route lists as accepted, e.g. in the about route and in a 415. */
export const ACCEPTED_TYPES: readonly string[] = Object.values(BODY_TYPES);

/**
 * Types read as JSON besides application/json: what `fetch` (text/plain) and `curl -d`
 * (x-www-form-urlencoded) send for a string body when the client names no type, so existing
 * clients keep working.
 */
const JSON_ALIASES = new Set(['text/plain', 'application/x-www-form-urlencoded']);

function mediaType(value: string): string {
  return value.split(';')[0]!.trim().toLowerCase();
}

/**
 * The format of a request body from its Content-Type (none given: JSON).
 * @example bodyFormatOf(req) // 'npy' for "Content-Type: application/x-npy"
 * @throws HttpProblem 415 listing the accepted types.
 */
export function bodyFormatOf(req: IncomingMessage): BodyFormat {
  const header = req.headers['content-type'];
  if (header === undefined || header.trim() === '') return 'json';
  const type = mediaType(header);
  if (type === BODY_TYPES.json || type.endsWith('+json') || JSON_ALIASES.has(type)) return 'json';
  if (type === BODY_TYPES.npy) return 'npy';
  if (type === BODY_TYPES.csv) return 'csv';
  throw new HttpProblem(415, `Content-Type ${printableType(type)} is not accepted; send one of ${ACCEPTED_TYPES.join(', ')}`, {
    'accept-post': ACCEPTED_TYPES.join(', '),
  });
}

/**
 * The format the client asks for in Accept: the accepted type with the highest q (ties: the
 * first listed); JSON when Accept is absent or names none of ours.
 * @example answerFormatOf(req) // 'npy' for "Accept: application/x-npy"
 */
export function answerFormatOf(req: IncomingMessage): BodyFormat {
  const header = req.headers.accept;
  if (!header) return 'json';
  let best: BodyFormat = 'json';
  let bestQ = 0;
  for (const part of header.split(',')) {
    const [typePart, ...params] = part.split(';');
    const type = typePart!.trim().toLowerCase();
    const qParam = params.map((p) => p.trim()).find((p) => p.toLowerCase().startsWith('q='));
    const q = qParam ? Number(qParam.slice(2)) : 1;
    if (!(q > 0)) continue;
    const format = (Object.keys(BODY_TYPES) as BodyFormat[]).find((f) => BODY_TYPES[f] === type);
    if (format && q > bestQ) {
      best = format;
      bestQ = q;
    }
  }
  return best;
}

function printableType(type: string): string {
  const one = type.replace(/[^\x20-\x7e]/g, '?');
  return JSON.stringify(one.length > 60 ? `${one.slice(0, 60)}...` : one);
}
