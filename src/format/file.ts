/**
 * Model files on disk: read with one-line errors, write atomically (temporary file in the same
 * directory, fsync, rename over the target, fsync the directory), so a reader never sees a
 * half-written model and a failed write leaves the old file untouched.
 */
import { randomBytes } from 'node:crypto';
import * as fsp from 'node:fs/promises';
import { basename, dirname, join } from 'node:path';
import { ModelFileError, RuntimeFailure } from '../errors.js';
import type { ModelDoc } from '../model/types.js';
import { decodeModel, encodeModel } from './codec.js';
import { crc32, crcHex } from './crc32.js';
import { HEADER_BYTES, type FormatVersion } from './header.js';

/** Node's system error codes we turn into plain words. */
const CAUSES: Record<string, string> = {
  ENOENT: 'no such file or directory',
  EACCES: 'permission denied',
  EPERM: 'operation not permitted',
  EISDIR: 'is a directory',
  ENOTDIR: 'a parent path is not a directory',
  EROFS: 'read-only file system',
  ENOSPC: 'no space left on device',
};

/** Codes the user causes (a wrong path, a locked directory): exit 2 rather than 1. */
const USER_CAUSED = new Set(['ENOENT', 'EACCES', 'EPERM', 'EISDIR', 'ENOTDIR', 'EROFS']);

function errorCode(error: unknown): string {
  if (error instanceof Error && 'code' in error && typeof error.code === 'string') return error.code;
  return '';
}

function describe(error: unknown): string {
  const code = errorCode(error);
  if (code in CAUSES) return `${CAUSES[code]} (${code})`;
  return error instanceof Error ? error.message : String(error);
}

function fileSystemError(path: string, doing: string, error: unknown): Error {
  if (error instanceof ModelFileError || error instanceof RuntimeFailure) return error;
  const what = `cannot ${doing}: ${describe(error)}`;
  return USER_CAUSED.has(errorCode(error)) ? new ModelFileError(path, [{ where: '', message: what }]) : new RuntimeFailure(`${path}: ${what}`);
}

/**
 * The checksum of an encoded model file: CRC-32 of its payload (the bytes after the 16-byte
 * header), as 8 lowercase hex digits, the same value the header stores and provenance records.
 *
 * @example
 * checksumOf(encodeModel(doc)) // e.g. '1c291ca3'
 */
export function checksumOf(fileBytes: Uint8Array): string {
  if (fileBytes.length < HEADER_BYTES) {
    throw new ModelFileError('(bytes)', [{ where: 'header', message: `${fileBytes.length} bytes is shorter than the ${HEADER_BYTES}-byte header` }]);
  }
  return crcHex(crc32(fileBytes.subarray(HEADER_BYTES)));
}

export interface ReadModel {
  readonly doc: ModelDoc;
  readonly checksum: string;
  /** Size of the file in bytes. */
  readonly bytes: number;
  readonly version: FormatVersion;
}

/**
 * Read and fully check a model file.
 * Throws ModelFileError for a missing or unreadable file and for every problem in its content.
 *
 * @example
 * const { doc, checksum } = await readModelFile('models/score.tdn');
 */
export async function readModelFile(path: string): Promise<ReadModel> {
  let bytes: Uint8Array;
  try {
    bytes = await fsp.readFile(path);
  } catch (error) {
    throw fileSystemError(path, 'read the model file', error);
  }
  const { doc, checksum, version } = decodeModel(bytes, path);
  return { doc, checksum, bytes: bytes.length, version };
}

/** The file-system steps of an atomic write, replaceable so tests can make one of them fail. */
export interface AtomicWriteSteps {
  open: typeof fsp.open;
  rename: typeof fsp.rename;
  unlink: typeof fsp.unlink;
}

const NODE_STEPS: AtomicWriteSteps = { open: fsp.open, rename: fsp.rename, unlink: fsp.unlink };

/**
 * Replace `path` with `bytes` atomically: write a uniquely named temporary file beside it,
 * flush it to disk, rename it over the target, then flush the directory entry where the
 * platform allows. On any failure the temporary file is removed and the target is untouched.
 */
export async function writeBytesAtomic(path: string, bytes: Uint8Array, steps: AtomicWriteSteps = NODE_STEPS): Promise<void> {
  const dir = dirname(path);
  const temp = join(dir, `.${basename(path)}.${process.pid}-${randomBytes(6).toString('hex')}.tmp`);
  let created = false;
  try {
    // 'wx': never reuse an existing file of the same name.
    const handle = await steps.open(temp, 'wx', 0o644);
    created = true;
    try {
      let offset = 0;
      while (offset < bytes.length) {
        const { bytesWritten } = await handle.write(bytes, offset, bytes.length - offset, offset);
        offset += bytesWritten;
      }
      await handle.sync();
    } finally {
      await handle.close();
    }
    await steps.rename(temp, path);
    created = false;
  } catch (error) {
    if (created) await steps.unlink(temp).catch(() => undefined);
    throw fileSystemError(path, 'write the model file', error);
  }
  await syncDirectory(dir);
  await removeStaleTemps(dir, basename(path));
}

/** Temporary files of earlier saves of `base`: `.BASE.PID-HEX.tmp`, the name writeBytesAtomic gives. */
function staleTempPattern(base: string): RegExp {
  const escaped = base.replace(/[.*+?^${}()|[\]\\]/g, '\\$&');
  return new RegExp(`^\\.${escaped}\\.(\\d+)-[0-9a-f]{12}\\.tmp$`);
}

/** True when a process with this id exists (signal 0 only checks; EPERM means it exists but is not ours). */
function processAlive(pid: number): boolean {
  try {
    process.kill(pid, 0);
    return true;
  } catch (error) {
    return errorCode(error) === 'EPERM';
  }
}

/**
 * After a successful save, remove temporary files that earlier saves of the same target left
 * behind when their process was killed mid-write (SIGKILL, power loss). Only temps of
 * processes that no longer exist are touched: a live process may be writing its own right now.
 * Best effort: a failure here never fails the save.
 */
async function removeStaleTemps(dir: string, base: string): Promise<void> {
  const pattern = staleTempPattern(base);
  let names: string[];
  try {
    names = await fsp.readdir(dir);
  } catch {
    return;
  }
  for (const name of names) {
    const match = pattern.exec(name);
    if (!match) continue;
    const pid = Number(match[1]);
    if (pid === process.pid || processAlive(pid)) continue;
    await fsp.unlink(join(dir, name)).catch(() => undefined);
  }
}

/** Make the rename durable. Some platforms cannot open or fsync a directory; that is not an error. */
async function syncDirectory(dir: string): Promise<void> {
  let handle: fsp.FileHandle | null = null;
  try {
    handle = await fsp.open(dir, 'r');
    await handle.sync();
  } catch {
    // Best effort only: the data itself is already synced and renamed.
  } finally {
    await handle?.close().catch(() => undefined);
  }
}

/**
 * Encode, self-check and atomically write a model file. The encoded bytes are decoded and
 * checked before the target is touched, so a document that would make an unreadable file
 * throws ModelFileError and the old file stays.
 *
 * @example
 * const { checksum, bytes } = await writeModelFile('models/score.tdn', doc);
 */
export async function writeModelFile(path: string, doc: ModelDoc, steps?: AtomicWriteSteps): Promise<{ checksum: string; bytes: number }> {
  const bytes = encodeModel(doc, path);
  const { checksum } = decodeModel(bytes, path);
  await writeBytesAtomic(path, bytes, steps);
  return { checksum, bytes: bytes.length };
}
