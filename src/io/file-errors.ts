/**
 * Turns operating-system errors about a data file into DataError, so the CLI prints one line.
 */
import { DataError } from '../errors.js';

const WHY: Record<string, string> = {
  ENOENT: 'no such file',
  EISDIR: 'is a directory, not a file',
  EACCES: 'permission denied',
  EPERM: 'permission denied',
  ENOSPC: 'no space left on the device',
  EROFS: 'read-only file system',
};

/** Rethrows a DataError as is; wraps a known system error; rethrows anything else. */
export function asDataError(file: string, error: unknown): Error {
  if (error instanceof DataError) return error;
  const code = (error as { code?: unknown } | null)?.code;
  if (typeof code === 'string' && code in WHY) return new DataError(file, 0, 0, WHY[code]);
  return error instanceof Error ? error : new Error(String(error));
}

/** Longest cell text an error message repeats; a longer one is cut, with its length said. */
const SHOWN_CELL_CHARS = 48;

/**
 * A cell's text for an error message, JSON-quoted and cut when long, so a 10 MB cell still
 * gives a one-line message a person can read.
 *
 * @example shownCell('x'.repeat(1e6)) // '"xx…x"… (1000000 characters)', 48 x's between the quotes
 */
export function shownCell(text: string): string {
  if (text.length <= SHOWN_CELL_CHARS) return JSON.stringify(text);
  return `${JSON.stringify(text.slice(0, SHOWN_CELL_CHARS))}… (${text.length} characters)`;
}

/**
 * Column names for an error message: the first few, each cut by `shownCell`, then how many more.
 *
 * @example shownNames(['a', 'b']) // '"a", "b"'
 */
export function shownNames(names: readonly string[], max = 12): string {
  const shown = names.slice(0, max).map(shownCell).join(', ');
  return names.length > max ? `${shown}, … and ${names.length - max} more` : shown;
}
