/**
 * `tendon score --shard K/N`: N parts of contiguous rows whose outputs, concatenated in order,
 * equal one full run exactly (CSV and JSONL text, NPY values bit for bit), for row counts that
 * N does not divide. The NPY input is test/fixtures/serve/loaves-23.npy, written by NumPy.
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { BAKERY_FEATURES, bakeryDoc } from '../fixtures/models.js';
import { writeModelFile } from '../../src/format/index.js';
import { decodeNpy } from '../../src/io/index.js';
import { tableLayout } from '../../src/cli/model-input.js';
import { runCli } from './run-cli.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-shard-'));
const model = join(dir, 'bakery.tendon');
const ROWS = 23;
const loaf = (i: number) => [214 + i, 231 - i, 219 + i / 2, 44 + i, 1.6 + i / 20, 790 + 10 * i, 56 - i];

beforeAll(async () => {
  await writeModelFile(model, bakeryDoc(7));
  const rows = Array.from({ length: ROWS }, (_, i) => loaf(i));
  writeFileSync(join(dir, 'in.csv'), [BAKERY_FEATURES.join(','), ...rows.map((r) => r.join(','))].join('\n') + '\n');
  writeFileSync(join(dir, 'in.jsonl'), rows.map((r) => JSON.stringify(Object.fromEntries(BAKERY_FEATURES.map((f, k) => [f, r[k]])))).join('\n') + '\n');
  writeFileSync(join(dir, 'in.npy'), readFileSync(join(__dirname, '..', 'fixtures', 'serve', 'loaves-23.npy')));
});

afterAll(() => rmSync(dir, { recursive: true, force: true }));

async function scoreTo(input: string, output: string, ...extra: string[]): Promise<void> {
  const r = await runCli('score', model, '--input', join(dir, input), '--output', join(dir, output), '--batch', '4', ...extra);
  expect(r.err).not.toContain('Error');
  expect(r.code).toBe(0);
}

describe('tendon score --shard K/N', () => {
  it('takes the row count of an NPY input from its header (shape (23, 7), written by NumPy), and counts the rows of a text file by reading them', async () => {
    expect((await tableLayout(join(dir, 'in.npy'))).rowsTotal).toBe(ROWS);
    expect((await tableLayout(join(dir, 'in.csv'))).rowsTotal).toBeUndefined();
    expect((await tableLayout(join(dir, 'in.jsonl'))).rowsTotal).toBeUndefined();
  });

  it.each([
    ['csv', 'csv'],
    ['jsonl', 'jsonl'],
    ['npy', 'npy'],
  ])('%s input: parts of 23 rows for N = 2, 3, 5 and 30 concatenate to the full run', async (format, out) => {
    await scoreTo(`in.${format}`, `full-${format}.${out}`);
    const full = readFileSync(join(dir, `full-${format}.${out}`));
    for (const n of [2, 3, 5, 30]) {
      const parts: Buffer[] = [];
      for (let k = 1; k <= n; k++) {
        const name = `part-${format}-${k}-of-${n}.${out}`;
        await scoreTo(`in.${format}`, name, '--shard', `${k}/${n}`);
        parts.push(readFileSync(join(dir, name)));
      }
      if (out === 'npy') {
        const fullArray = decodeNpy('full', full);
        const arrays = parts.map((p, k) => decodeNpy(`part ${k + 1}`, p));
        // Contiguous parts whose sizes differ by at most one row.
        const sizes = arrays.map((a) => a.shape[0]!);
        expect(sizes.reduce((a, b) => a + b, 0)).toBe(ROWS);
        expect(Math.max(...sizes) - Math.min(...sizes)).toBeLessThanOrEqual(1);
        const joined = new Float32Array(fullArray.data.length);
        let at = 0;
        for (const a of arrays) {
          joined.set(a.data as Float32Array, at);
          at += a.data.length;
        }
        expect(at).toBe(fullArray.data.length);
        expect(
          Buffer.from(joined.buffer).equals(
            Buffer.from((fullArray.data as Float32Array).buffer, (fullArray.data as Float32Array).byteOffset, fullArray.data.byteLength),
          ),
        ).toBe(true);
      } else if (out === 'csv') {
        // Each part has the header; the rows under it, in order, are the full run's rows.
        const [header, ...rows] = full.toString('utf8').trimEnd().split('\n');
        const partRows = parts.flatMap((p) => {
          const [h, ...r] = p.toString('utf8').trimEnd().split('\n');
          expect(h).toBe(header);
          return r;
        });
        expect(partRows).toEqual(rows);
      } else {
        expect(Buffer.concat(parts).toString('utf8')).toBe(full.toString('utf8'));
      }
    }
  });

  it.each([
    ['0/3', 'K must be 1 to 3 (parts are counted from 1), got 0'],
    ['4/3', 'K must be 1 to 3 (parts are counted from 1), got 4'],
    ['1/0', 'N must be at least 1, got 0'],
    ['2', 'expected K/N such as 2/5 (part K of N, counted from 1), got "2"'],
    ['a/b', 'expected K/N such as 2/5'],
    ['-1/3', 'expected K/N such as 2/5'],
  ])('--shard %s is a usage error (exit 2): %s', async (shard, message) => {
    const r = await runCli('score', model, '--input', join(dir, 'in.csv'), '--output', join(dir, 'never.csv'), '--shard', shard);
    expect(r.code).toBe(2);
    expect(r.err).toContain(`--shard: ${message}`);
    expect(r.err.trim().split('\n')).toHaveLength(1);
  });
});
