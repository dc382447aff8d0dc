/** Shared helpers for the io tests: temporary files, seeded data, DataError capture. */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, expect } from 'vitest';
import { DataError } from '../../src/errors.js';

/** A temporary folder removed after the test file's suite. */
export function tempFolder(): (name: string, content?: string | Uint8Array) => string {
  const dir = mkdtempSync(join(tmpdir(), 'tendon-io-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));
  return (name, content) => {
    const path = join(dir, name);
    if (content !== undefined) writeFileSync(path, content);
    return path;
  };
}

/** Runs `action`, expects a DataError, and returns it for field checks. */
export async function captureDataError(action: () => Promise<unknown> | unknown): Promise<DataError> {
  try {
    await action();
  } catch (error) {
    expect(error).toBeInstanceOf(DataError);
    return error as DataError;
  }
  throw new Error('expected a DataError, but nothing was thrown');
}

/** The seeded generator for invented data, shared with the other suites. */
export { seededRandom } from '../fixtures/models.js';

export const FIXTURES = fileURLToPath(new URL('../fixtures/io/', import.meta.url));
