/**
 * The scoring path around the engine: a float32 NPY input read straight into the engine's arrays
 * gives the scores the value-by-value readers give, and each command loads only what it needs
 * (tfjs for the tfjs engines alone, protobufjs only with a model file). The load checks run the
 * built dist/cli.js (npm test builds first).
 */
import { spawnSync } from 'node:child_process';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { pathToFileURL } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { writeModelFile } from '../../src/format/index.js';
import { decodeNpy, encodeNpy } from '../../src/io/index.js';
import { SeededRng } from '../../src/model/index.js';
import { docOf, randomDense } from '../fixtures/models.js';
import { runCli } from './run-cli.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-score-path-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));
const cli = resolve(import.meta.dirname, '../../dist/cli.js');

const rng = new SeededRng(31);
const doc = docOf(12, [randomDense(rng, 12, 20, 'relu'), randomDense(rng, 20, 3, 'softmax')]);
const ROWS = 1001;
// Multiples of 1/8: the CSV text and the float32 NPY hold exactly the same numbers.
const x = Float32Array.from({ length: ROWS * 12 }, () => Math.round(rng.normal() * 40) / 8);

async function prepare(): Promise<{ model: string; npy: string; csv: string }> {
  const model = join(dir, 'm.tendon');
  await writeModelFile(model, doc);
  const npy = join(dir, 'x.npy');
  writeFileSync(npy, encodeNpy(x, [ROWS, 12]));
  const csv = join(dir, 'x.csv');
  const lines = Array.from({ length: ROWS }, (_, r) => Array.from(x.subarray(r * 12, (r + 1) * 12)).join(','));
  writeFileSync(csv, lines.join('\n') + '\n');
  return { model, npy, csv };
}

describe('tendon score on a float32 NPY', () => {
  it.each(['fast', 'int8', 'js'])('gives the same scores as the same rows in CSV (%s engine), in batches that do not divide the rows', async (engine) => {
    const { model, npy, csv } = await prepare();
    const fromNpy = join(dir, `npy-${engine}.npy`);
    const fromCsv = join(dir, `csv-${engine}.npy`);
    expect((await runCli('score', model, '-i', npy, '-o', fromNpy, '--engine', engine, '--batch', '96')).code).toBe(0);
    expect((await runCli('score', model, '-i', csv, '-o', fromCsv, '--engine', engine, '--batch', '96')).code).toBe(0);
    const a = decodeNpy(fromNpy, readFileSync(fromNpy));
    const b = decodeNpy(fromCsv, readFileSync(fromCsv));
    expect(a.shape).toEqual([ROWS, 3]);
    expect(Buffer.from(a.data.buffer).equals(Buffer.from(b.data.buffer))).toBe(true);
  });
});

/** Runs dist/cli.js with `args` and says whether tfjs-core and protobufjs were loaded by the end. */
function loadedBy(args: string[]): { code: number | null; tfjs: boolean; protobufjs: boolean } {
  const script = [
    "import { createRequire } from 'node:module';",
    'const require = createRequire(import.meta.url);',
    `process.argv = [process.argv[0], ${JSON.stringify(cli)}, ...${JSON.stringify(args)}];`,
    "process.on('exit', () => { const k = Object.keys(require.cache); process.stderr.write('\\nLOADED ' + JSON.stringify({ tfjs: k.some((p) => p.includes('tfjs-core')), protobufjs: k.some((p) => p.includes('protobufjs')) }) + '\\n'); });",
    `await import(${JSON.stringify(pathToFileURL(cli).href)});`,
  ].join('\n');
  const run = spawnSync(process.execPath, ['--input-type=module', '-e', script], { encoding: 'utf8' });
  const line = /LOADED (.*)/.exec(run.stderr)?.[1];
  if (!line) throw new Error(`no load report: ${run.stderr}`);
  return { code: run.status, ...JSON.parse(line) };
}

describe('what a command loads', () => {
  it('--help loads neither tfjs nor protobufjs', () => {
    expect(loadedBy(['--help'])).toEqual({ code: 0, tfjs: false, protobufjs: false });
  });

  it('score on the fast and int8 engines reads the model (protobufjs) but never loads tfjs; the js engine does load it', async () => {
    const { model, npy } = await prepare();
    for (const engine of ['fast', 'int8']) {
      expect(loadedBy(['score', model, '-i', npy, '-o', join(dir, `load-${engine}.npy`), '--engine', engine]), engine).toEqual({
        code: 0,
        tfjs: false,
        protobufjs: true,
      });
    }
    expect(loadedBy(['score', model, '-i', npy, '-o', join(dir, 'load-js.npy'), '--engine', 'js'])).toEqual({ code: 0, tfjs: true, protobufjs: true });
  });
});
