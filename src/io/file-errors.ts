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
