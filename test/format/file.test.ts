import * as fsp from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { ModelFileError, RuntimeFailure } from '../../src/errors.js';
import { decodeModel, encodeModel } from '../../src/format/codec.js';
import { checksumOf, readModelFile, writeModelFile, type AtomicWriteSteps } from '../../src/format/file.js';
import type { DenseLayer } from '../../src/model/types.js';
import { everyKindDoc, tinyDoc } from '../fixtures/models.js';

let dir = '';
beforeEach(async () => {
  dir = await fsp.mkdtemp(join(tmpdir(), 'tendon-format-'));
});
afterEach(async () => {
  await fsp.rm(dir, { recursive: true, force: true });
});

function failure(code: string): Error {
  return Object.assign(new Error(`simulated ${code}`), { code });
}

describe('readModelFile / writeModelFile', () => {
  it('writes and reads back the same document, checksum and size', async () => {
    const path = join(dir, 'model.tdn');
    const doc = everyKindDoc();
    const written = await writeModelFile(path, doc);
    const read = await readModelFile(path);
    expect(read.doc).toEqual(doc);
    expect(read.checksum).toBe(written.checksum);
    expect(read.bytes).toBe(written.bytes);
    expect((await fsp.stat(path)).size).toBe(written.bytes);
    expect(checksumOf(await fsp.readFile(path))).toBe(written.checksum);
    expect(await fsp.readdir(dir)).toEqual(['model.tdn']);
  });

  it('a missing file is a one-line ModelFileError naming the path', async () => {
    const path = join(dir, 'nope.tdn');
    const error = await readModelFile(path).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as ModelFileError).message).toBe(`${path}: cannot read the model file: no such file or directory (ENOENT)`);
  });

  it('a directory in place of the file is a ModelFileError', async () => {
    const error = await readModelFile(dir).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as ModelFileError).message).toContain('is a directory');
  });

  it('a damaged file on disk reports its content problems with the path', async () => {
    const path = join(dir, 'bad.tdn');
    const bytes = encodeModel(tinyDoc());
    bytes[bytes.length - 1] ^= 1;
    await fsp.writeFile(path, bytes);
    const error = await readModelFile(path).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as ModelFileError).path).toBe(path);
    expect((error as ModelFileError).message).toContain('CRC-32 mismatch');
  });
});

describe('atomic write: the target keeps its old complete content when a write fails', () => {
  async function setUpOld(): Promise<{ path: string; old: Uint8Array }> {
    const path = join(dir, 'model.tdn');
    await writeModelFile(path, tinyDoc(1));
    return { path, old: await fsp.readFile(path) };
  }

  async function expectOldIntact(path: string, old: Uint8Array): Promise<void> {
    const now = await fsp.readFile(path);
    expect(Buffer.compare(now, old)).toBe(0);
    expect(decodeModel(now, path).doc).toEqual(tinyDoc(1));
    expect(await fsp.readdir(dir)).toEqual(['model.tdn']);
  }

  it('a document that cannot be encoded (f16 overflow) never touches the target', async () => {
    const { path, old } = await setUpOld();
    const doc = tinyDoc(2);
    (doc.layers[0] as DenseLayer).weight[0] = 1e9;
    const error = await writeModelFile(path, { ...doc, storage: 'f16' }).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as ModelFileError).problems[0].where).toBe('layers[0].dense.weight');
    await expectOldIntact(path, old);
  });

  it('a failure midway through writing the temporary file (disk full after half the bytes) leaves no temp file', async () => {
    const { path, old } = await setUpOld();
    const halfThenFull: AtomicWriteSteps = {
      open: async (...args: Parameters<typeof fsp.open>) => {
        const handle = await fsp.open(...args);
        const realWrite = handle.write.bind(handle);
        let calls = 0;
        handle.write = (async (buffer: Uint8Array, offset: number, length: number, position: number) => {
          calls++;
          if (calls > 1) throw failure('ENOSPC');
          return realWrite(buffer, offset, Math.ceil(length / 2), position);
        }) as typeof handle.write;
        return handle;
      },
      rename: fsp.rename,
      unlink: fsp.unlink,
    };
    const error = await writeModelFile(path, everyKindDoc(), halfThenFull).catch((e: unknown) => e);
    // Disk full is not the user's doing: exit code 1.
    expect(error).toBeInstanceOf(RuntimeFailure);
    expect((error as Error).message).toContain('no space left on device');
    await expectOldIntact(path, old);
  });

  it('a failure at the rename (after the temp file is complete and synced) leaves no temp file', async () => {
    const { path, old } = await setUpOld();
    let renamed = 0;
    const failingRename: AtomicWriteSteps = {
      open: fsp.open,
      rename: async () => {
        renamed++;
        throw failure('EACCES');
      },
      unlink: fsp.unlink,
    };
    const error = await writeModelFile(path, everyKindDoc(), failingRename).catch((e: unknown) => e);
    expect(renamed).toBe(1);
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as Error).message).toContain('permission denied');
    await expectOldIntact(path, old);
  });

  it('writing into a directory that does not exist is a ModelFileError and creates nothing', async () => {
    const path = join(dir, 'missing', 'model.tdn');
    const error = await writeModelFile(path, tinyDoc()).catch((e: unknown) => e);
    expect(error).toBeInstanceOf(ModelFileError);
    expect(await fsp.readdir(dir)).toEqual([]);
  });
});

describe('checksumOf', () => {
  it('is the CRC-32 stored in the header (bytes 12..15, little-endian)', () => {
    const bytes = encodeModel(everyKindDoc());
    const stored = new DataView(bytes.buffer, bytes.byteOffset).getUint32(12, true);
    expect(checksumOf(bytes)).toBe(stored.toString(16).padStart(8, '0'));
  });

  it('refuses fewer bytes than a header', () => {
    expect(() => checksumOf(new Uint8Array(3))).toThrow(ModelFileError);
  });
});
