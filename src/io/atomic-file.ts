/**
 * Files written under a temporary name and renamed into place on commit, so a reader never
 * sees half a file and a failed run leaves the old file (if any) untouched.
 */
import { randomBytes } from 'node:crypto';
import { open, rename, rm, type FileHandle } from 'node:fs/promises';
import { basename, dirname, join } from 'node:path';
import { asDataError } from './file-errors.js';

export interface AtomicFile {
  readonly path: string;
  /** Appends; resolves when the bytes are handed to the OS (await it: that is the backpressure). */
  append(bytes: Uint8Array | string): Promise<void>;
  /** Overwrites bytes at a position without moving the append point. */
  writeAt(bytes: Uint8Array, position: number): Promise<void>;
  /** Flushes, closes and renames into place. */
  commit(): Promise<void>;
  /** Closes and removes the temporary file. */
  abort(): Promise<void>;
}

/**
 * @example
 * const f = await openAtomicFile('out.csv');
 * await f.append('a,b\n'); await f.commit();
 */
export async function openAtomicFile(path: string): Promise<AtomicFile> {
  // Same folder as the target so the rename never crosses file systems.
  const temp = join(dirname(path), `.${basename(path)}.${process.pid}.${randomBytes(4).toString('hex')}.part`);
  let handle: FileHandle;
  try {
    handle = await open(temp, 'w');
  } catch (error) {
    throw asDataError(path, error);
  }
  let position = 0;
  let done = false;
  const guard = (): void => {
    if (done) throw new Error(`${path}: the file was already closed`);
  };
  return {
    path,
    async append(bytes) {
      guard();
      const buffer = typeof bytes === 'string' ? Buffer.from(bytes, 'utf8') : bytes;
      await writeFully(handle, path, buffer, position);
      position += buffer.length;
    },
    async writeAt(bytes, at) {
      guard();
      await writeFully(handle, path, bytes, at);
    },
    async commit() {
      guard();
      done = true;
      try {
        await handle.sync();
        await handle.close();
        await rename(temp, path);
      } catch (error) {
        await rm(temp, { force: true });
        throw asDataError(path, error);
      }
    },
    async abort() {
      if (done) return;
      done = true;
      await handle.close().catch(() => undefined);
      await rm(temp, { force: true });
    },
  };
}

async function writeFully(handle: FileHandle, path: string, bytes: Uint8Array, position: number): Promise<void> {
  let done = 0;
  try {
    // A write may take fewer bytes than offered; loop until all are in.
    while (done < bytes.length) {
      const { bytesWritten } = await handle.write(bytes, done, bytes.length - done, position + done);
      done += bytesWritten;
    }
  } catch (error) {
    throw asDataError(path, error);
  }
}
