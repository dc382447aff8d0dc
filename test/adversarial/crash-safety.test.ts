/**
 * Crash safety: a process killed with SIGKILL (no handler runs, nothing is flushed) at seeded
 * random moments while it saves models or runs `tendon tune`. Afterwards the target path holds
 * the complete old file or the complete new one, the input model is byte-identical, and any
 * temporary file left behind is a clearly named hidden `.tmp` beside the target that the next
 * successful save of that target removes.
 *
 * The children run the built package (dist/), as a service would; `npm test` builds it first.
 */
import { spawn, type ChildProcess } from 'node:child_process';
import { copyFile, mkdtemp, readdir, readFile, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel } from '../../src/format/codec.js';
import { checksumOf, writeModelFile } from '../../src/format/file.js';
import type { ModelDoc } from '../../src/model/types.js';
import { randomFloat32, seededRandom } from '../fixtures/models.js';

const ROOT = join(import.meta.dirname, '..', '..');
const CLI = join(ROOT, 'dist', 'cli.js');
const SAVE_LOOP = join(import.meta.dirname, 'children', 'save-loop.mjs');

/** A 3 -> hidden -> hidden -> 2 model; the default 600 gives about 1.4 MB of float32 weights, so a save takes a while. */
function bigDoc(seed: number, hidden = 600): ModelDoc {
  const random = seededRandom(seed);
  const dense = (inputs: number, units: number, activation: 'relu' | 'softmax') => ({
    kind: 'dense' as const,
    size: units,
    activation,
    alpha: 0,
    weight: randomFloat32(random, inputs * units, 0.05),
    bias: randomFloat32(random, units, 0.01),
  });
  return {
    inputs: 3,
    features: ['a', 'b', 'c'],
    labels: ['no', 'yes'],
    normalise: null,
    layers: [dense(3, hidden, 'relu'), dense(hidden, hidden, 'relu'), dense(hidden, 2, 'softmax')],
    meta: { name: `big-${seed}`, description: '', created: '2025-01-01T00:00:00.000Z', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

/** Resolves when `child` prints a line matching `pattern`. */
function waitForLine(child: ChildProcess, pattern: RegExp): Promise<void> {
  return new Promise((resolve, reject) => {
    let seen = '';
    const onData = (chunk: Buffer) => {
      seen += chunk.toString();
      if (pattern.test(seen)) {
        child.stdout?.off('data', onData);
        resolve();
      }
    };
    child.stdout?.on('data', onData);
    child.once('exit', (code) => reject(new Error(`child exited (${code}) before printing ${pattern}: ${seen.slice(-200)}`)));
  });
}

function killAndWait(child: ChildProcess): Promise<void> {
  return new Promise((resolve) => {
    if (child.exitCode !== null || child.signalCode !== null) return resolve();
    child.once('exit', () => resolve());
    child.kill('SIGKILL');
  });
}

/** Byte equality without a deep-equality walk over a megabyte of elements. */
const sameBytes = (a: Uint8Array, b: Uint8Array) =>
  Buffer.compare(Buffer.from(a.buffer, a.byteOffset, a.byteLength), Buffer.from(b.buffer, b.byteOffset, b.byteLength)) === 0;

const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

/** Poll until `path` no longer holds the model with checksum `oldSum` (or the child has exited). */
async function untilReplaced(path: string, oldSum: string, child: ChildProcess): Promise<void> {
  while (child.exitCode === null && child.signalCode === null) {
    const bytes = await readFile(path).catch(() => null);
    if (bytes && checksumOf(bytes) !== oldSum) return;
    await sleep(5);
  }
}

/** The temp-file name writeBytesAtomic gives: hidden, beside the target, pid and random hex, `.tmp`. */
const tempNameOf = (target: string) => new RegExp(`^\\.${target.replace(/[.]/g, '\\.')}\\.\\d+-[0-9a-f]{12}\\.tmp$`);

/** The target decodes completely; returns its checksum. Leftovers must be temps of the target. */
async function inspect(dir: string, targetName: string, known: readonly string[]): Promise<{ checksum: string; temps: string[] }> {
  const bytes = await readFile(join(dir, targetName));
  const { checksum } = decodeModel(bytes, targetName);
  const names = await readdir(dir);
  const temps = names.filter((n) => !known.includes(n));
  for (const name of temps) {
    expect(name).toMatch(tempNameOf(targetName));
    // A temp is never a model a reader would take: it is either a partial write that the
    // framing refuses, or a complete copy of one of the two documents (killed before rename).
    const tempBytes = await readFile(join(dir, name));
    try {
      decodeModel(tempBytes, name);
    } catch (error) {
      expect(error).toBeInstanceOf(ModelFileError);
    }
  }
  return { checksum, temps };
}

describe('SIGKILL while saving', () => {
  let dir: string;
  let fileA: string;
  let fileB: string;
  let bytesA: Uint8Array;
  let bytesB: Uint8Array;

  beforeAll(async () => {
    dir = await mkdtemp(join(tmpdir(), 'tendon-crash-'));
    bytesA = encodeModel(bigDoc(1));
    bytesB = encodeModel(bigDoc(2));
    fileA = join(dir, 'a.tendon');
    fileB = join(dir, 'b.tendon');
    await writeFile(fileA, bytesA);
    await writeFile(fileB, bytesB);
  });

  it('a process looping saves of two models, killed at 8 seeded moments: the target is always one complete model; stale temps are removed by the next save', async () => {
    const target = 'target.tendon';
    await copyFile(fileA, join(dir, target));
    const sums = [checksumOf(bytesA), checksumOf(bytesB)];
    expect(sums[0]).not.toBe(sums[1]);
    const random = seededRandom(0xc0ffee);
    const seen = new Set<string>();
    let leftovers = 0;
    for (let trial = 0; trial < 8; trial++) {
      const child = spawn(process.execPath, [SAVE_LOOP, join(dir, target), fileA, fileB], { stdio: ['ignore', 'pipe', 'pipe'] });
      await waitForLine(child, /ready\n/);
      // Seeded moments; on a machine so loaded that the loop has not yet written the other
      // model by the last trial, that trial waits until it has, so both outcomes are tried.
      if (trial === 7 && seen.size < 2) await untilReplaced(join(dir, target), [...seen][0], child);
      else await sleep(random() * 400);
      await killAndWait(child);
      const { checksum, temps } = await inspect(dir, target, ['a.tendon', 'b.tendon', target]);
      expect(sums).toContain(checksum);
      seen.add(checksum);
      leftovers = Math.max(leftovers, temps.length);
    }
    // The inputs were only read.
    expect(sameBytes(await readFile(fileA), bytesA)).toBe(true);
    expect(sameBytes(await readFile(fileB), bytesB)).toBe(true);
    // Kills landed at different points of the loop (both documents were seen at the target).
    expect(seen.size).toBe(2);

    // Whatever the kills left, one successful save of the same target clears stale temps of
    // dead processes. A planted one proves the cleanup runs even if no kill hit mid-write.
    const planted = `.${target}.999999999-0123456789ab.tmp`;
    await writeFile(join(dir, planted), bytesA.subarray(0, 100));
    // A temp of another target is not ours to remove.
    const other = '.other.tendon.999999999-0123456789ab.tmp';
    await writeFile(join(dir, other), 'x');
    await writeModelFile(join(dir, target), bigDoc(3));
    const after = await readdir(dir);
    expect(after.filter((n) => tempNameOf(target).test(n))).toEqual([]);
    expect(after).toContain(other);
    console.info(`save-loop kills: at most ${leftovers} stale temp file(s) after one kill; all removed by the next save`);
  }, 120_000);

  it("a live process's temp file is left alone by another process's save (it may be mid-write)", async () => {
    const target = 'shared.tendon';
    const child = spawn(process.execPath, ['-e', 'setInterval(() => {}, 1000)'], { stdio: 'ignore' });
    try {
      const liveTemp = `.${target}.${child.pid}-abcdefabcdef.tmp`;
      await writeFile(join(dir, liveTemp), 'partial');
      await writeModelFile(join(dir, target), bigDoc(4));
      expect(await readdir(dir)).toContain(liveTemp);
    } finally {
      await killAndWait(child);
    }
  });
});

describe('SIGKILL during tendon tune', () => {
  it('killed at 8 seeded moments of a run: -o holds the old model or the complete tuned one, and the input model is byte-identical', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'tendon-crash-tune-'));
    const input = join(dir, 'input.tendon');
    const inputBytes = encodeModel(bigDoc(5, 32));
    await writeFile(input, inputBytes);
    const inputSum = checksumOf(inputBytes);
    // 2000 seeded rows: the class is whether a + b - c > 0.
    const random = seededRandom(77);
    const lines = ['a,b,c,label'];
    for (let i = 0; i < 2000; i++) {
      const [a, b, c] = [random() * 2 - 1, random() * 2 - 1, random() * 2 - 1];
      lines.push(`${a.toFixed(4)},${b.toFixed(4)},${c.toFixed(4)},${a + b - c > 0 ? 'yes' : 'no'}`);
    }
    const data = join(dir, 'rows.csv');
    await writeFile(data, lines.join('\n') + '\n');
    const out = join(dir, 'tuned.tendon');
    const old = encodeModel(bigDoc(6, 32));
    const args = [CLI, 'tune', input, '--data', data, '--target', 'label', '-o', out, '--epochs', '3', '--batch', '32', '--engine', 'js', '--seed', '1'];

    // One full run to learn how long it takes.
    await writeFile(out, old);
    const started = performance.now();
    const full = spawn(process.execPath, args, { stdio: ['ignore', 'pipe', 'pipe'] });
    let stderr = '';
    full.stderr?.on('data', (c: Buffer) => (stderr += c.toString()));
    const code = await new Promise<number | null>((r) => full.once('exit', r));
    expect(stderr).toBe('');
    expect(code).toBe(0);
    const duration = performance.now() - started;

    // Kills are placed so that both outcomes occur whatever the machine's load: trial 0 as soon
    // as the process exists (long before Node has even loaded the CLI, so before any save);
    // trials 1-6 at seeded moments, one in each seventh of the full run; trial 7 as soon as the
    // tuned model has replaced the old one, while the process is still finishing.
    const killRandom = seededRandom(0x7a11);
    const oldSum = checksumOf(old);
    const outcomes = { old: 0, tuned: 0 };
    for (let trial = 0; trial < 8; trial++) {
      await writeFile(out, old);
      const child = spawn(process.execPath, args, { stdio: 'ignore' });
      if (trial === 0) await new Promise((r) => child.once('spawn', r));
      else if (trial < 7) await sleep(((trial + killRandom()) / 7) * duration);
      else await untilReplaced(out, oldSum, child);
      await killAndWait(child);
      const { checksum, temps } = await inspect(dir, 'tuned.tendon', ['input.tendon', 'rows.csv', 'tuned.tendon']);
      expect(temps.every((n) => n.endsWith('.tmp'))).toBe(true);
      if (checksum === checksumOf(old)) {
        outcomes.old++;
      } else {
        // Complete and new: a tuned child of the input, as the provenance records.
        const tuned = decodeModel(await readFile(out), out).doc;
        expect(tuned.provenance.at(-1)).toMatchObject({ checksum: inputSum, action: 'fine-tuned' });
        outcomes.tuned++;
      }
      expect(sameBytes(await readFile(input), inputBytes)).toBe(true);
    }
    expect(outcomes.old + outcomes.tuned).toBe(8);
    expect(outcomes.old).toBeGreaterThanOrEqual(1);
    expect(outcomes.tuned).toBeGreaterThanOrEqual(1);
    console.info(`tune kills: ${outcomes.old} left the old model, ${outcomes.tuned} the tuned one (full run ${duration.toFixed(0)} ms)`);
  }, 150_000);
});
