/**
 * What training and reporting make of real files: open datasets shipped by the Debian package
 * python3-sklearn (sklearn/datasets/data/, copied to test/fixtures/realdata), prepared as users prepare them (a CSV with a header,
 * the target as a named column), run through the command line. Each check names its dataset;
 * the accuracy and RMSE thresholds sit a little under what a small network reaches on each
 * (common practice for these datasets; measured figures beside each threshold).
 */
import { existsSync, linkSync, mkdtempSync, readFileSync, rmSync, symlinkSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { readModelFile } from '../../src/format/index.js';
import { writeNpy } from '../../src/io/index.js';
import { runCli } from '../cli/run-cli.js';
import { breastCancer, diabetes, digits, iris, linnerud, specOf, splitRows, wine, writeCsv, type Table } from './semantics-data.js';

const dir = mkdtempSync(join(tmpdir(), 'tendon-semantics-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

function writeSpec(name: string, spec: object): string {
  const path = join(dir, name);
  writeFileSync(path, JSON.stringify(spec));
  return path;
}

/** The numbers of a CSV the score command wrote: header, then one row of outputs per input row. */
function readOutputs(path: string): { header: string[]; rows: number[][] } {
  const [head, ...rest] = readFileSync(path, 'utf8').trim().split('\n');
  return { header: head.split(','), rows: rest.map((l) => l.split(',').map(Number)) };
}

/** Share of rows whose largest output's label equals the row's target cell. */
function accuracyOf(outputs: { header: string[]; rows: number[][] }, data: Table, rows: string[][]): number {
  const target = data.header.length - 1;
  let hits = 0;
  outputs.rows.forEach((o, r) => {
    const best = o.indexOf(Math.max(...o));
    if (outputs.header[best] === rows[r][target]) hits++;
  });
  return hits / rows.length;
}

function rmse(predicted: number[], actual: number[]): number {
  return Math.sqrt(predicted.reduce((s, p, i) => s + (p - actual[i]) ** 2, 0) / predicted.length);
}

describe('real files through tune, score, about and shrink (python3-sklearn datasets)', () => {
  it('Iris (Fisher 1936): a spec without feature names learns them from the header, so the model scores its own training file; held-out accuracy >= 0.9', async () => {
    const data = iris();
    const { train, test } = splitRows(data, 0.3, 1);
    const trainCsv = writeCsv(dir, 'iris-train.csv', data, train);
    const testCsv = writeCsv(dir, 'iris-test.csv', data, test);
    const spec = writeSpec('iris.json', specOf(4, [16], 3, 'softmax', ['setosa', 'versicolor', 'virginica']));
    const model = join(dir, 'iris.tendon');
    const tuned = await runCli(
      'tune',
      spec,
      '--data',
      trainCsv,
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
      '--seed',
      '1',
    );
    expect(tuned.code, tuned.err).toBe(0);
    expect((await readModelFile(model)).doc.features).toEqual(['sepal length (cm)', 'sepal width (cm)', 'petal length (cm)', 'petal width (cm)']);
    // The training file still holds its species column: matched by name, it is not read as a fifth feature.
    const own = await runCli('score', model, '--input', trainCsv, '--output', join(dir, 'iris-own.csv'));
    expect(own.code, own.err).toBe(0);
    const scored = await runCli('score', model, '--input', testCsv, '--output', join(dir, 'iris-scores.csv'));
    expect(scored.code, scored.err).toBe(0);
    // Measured 0.956 (seed 1); common practice for a small MLP on standardised Iris: >= 0.9.
    expect(accuracyOf(readOutputs(join(dir, 'iris-scores.csv')), data, test)).toBeGreaterThanOrEqual(0.9);
  });

  it('digits (Alpaydin and Kaynak, UCI): constant pixel columns train and save under z-score, with one warning naming exactly those columns; held-out accuracy >= 0.93', async () => {
    const data = digits();
    const { train, test } = splitRows(data, 0.25, 2);
    const trainCsv = writeCsv(dir, 'digits-train.csv', data, train);
    const testCsv = writeCsv(dir, 'digits-test.csv', data, test);
    // The columns constant in the training rows, computed here from the file itself.
    const constant = data.header.slice(0, 64).filter((_, c) => train.every((r) => r[c] === train[0][c]));
    expect(constant.length).toBeGreaterThanOrEqual(3); // the dataset's description: several columns constant
    const labels = Array.from({ length: 10 }, (_, i) => String(i));
    const spec = writeSpec('digits.json', specOf(64, [64], 10, 'softmax', labels));
    const model = join(dir, 'digits.tendon');
    const tuned = await runCli('tune', spec, '--data', trainCsv, '--target', 'digit', '-o', model, '--epochs', '20', '--seed', '2', '--log', 'text');
    expect(tuned.code, tuned.err).toBe(0);
    const warnings = tuned.err.split('\n').filter((l) => l.startsWith('warning'));
    expect(warnings).toHaveLength(1);
    expect(warnings[0]).toContain(`${constant.length} features were constant in the training rows (standard deviation 0)`);
    expect(warnings[0]).toContain(': ' + constant.join(', ') + ' —');
    const saved = await readModelFile(model);
    const norm = saved.doc.normalise!;
    if (norm.method !== 'zscore') throw new Error('zscore expected');
    expect(constant.map((name) => norm.std![data.header.indexOf(name)])).toEqual(constant.map(() => 0));
    const scored = await runCli('score', model, '--input', testCsv, '--output', join(dir, 'digits-scores.csv'));
    expect(scored.code, scored.err).toBe(0);
    // Measured 0.964; the issue reports 0.96 reached on digits.
    expect(accuracyOf(readOutputs(join(dir, 'digits-scores.csv')), data, test)).toBeGreaterThanOrEqual(0.93);
    // A hold-out split leaves more columns constant in what is trained on: still saved.
    const split = await runCli(
      'tune',
      spec,
      '--data',
      trainCsv,
      '--target',
      'digit',
      '-o',
      join(dir, 'digits-holdout.tendon'),
      '--epochs',
      '2',
      '--holdout',
      '0.5',
      '--seed',
      '3',
      '--log',
      'text',
    );
    expect(split.code, split.err).toBe(0);
    expect(split.err).toMatch(/features were constant in the training rows/);
  });

  it('diabetes (Efron et al. 2004): plain SGD on targets 25..346 trains with target scaling and beats the mean predictor on held-out rows; with --raw-targets it diverges and says nothing was saved', async () => {
    const data = diabetes();
    const { train, test } = splitRows(data, 0.25, 3);
    const trainCsv = writeCsv(dir, 'diabetes-train.csv', data, train);
    const testCsv = writeCsv(dir, 'diabetes-test.csv', data, test);
    const spec = writeSpec('diabetes.json', specOf(10, [32], 1, 'linear'));
    const model = join(dir, 'diabetes.tendon');
    const tuned = await runCli(
      'tune',
      spec,
      '--data',
      trainCsv,
      '--target',
      'progression',
      '-o',
      model,
      '--epochs',
      '100',
      '--optimizer',
      'sgd',
      '--seed',
      '3',
    );
    expect(tuned.code, tuned.err).toBe(0);
    const saved = await readModelFile(model);
    expect(saved.version).toEqual({ major: 2, minor: 0 });
    const targets = train.map((r) => Number(r[10]));
    const mean = targets.reduce((a, b) => a + b, 0) / targets.length;
    expect(saved.doc.targetScaling!.mean[0]).toBeCloseTo(mean, 6);
    const scored = await runCli('score', model, '--input', testCsv, '--output', join(dir, 'diabetes-scores.csv'));
    expect(scored.code, scored.err).toBe(0);
    const predicted = readOutputs(join(dir, 'diabetes-scores.csv')).rows.map((r) => r[0]);
    const actual = test.map((r) => Number(r[10]));
    const baseline = rmse(
      actual.map(() => mean),
      actual,
    );
    const ours = rmse(predicted, actual);
    // Measured: ours 54.9 against the mean predictor's 78.9 on these rows (0.70 of it). The least
    // angle regression paper's linear fit explains about half the variance (R^2 about 0.5, from
    // memory), an RMSE about 0.7 of the mean predictor's.
    expect(ours).toBeLessThan(0.85 * baseline);

    const rawOut = join(dir, 'diabetes-raw.tendon');
    const raw = await runCli(
      'tune',
      spec,
      '--data',
      trainCsv,
      '--target',
      'progression',
      '-o',
      rawOut,
      '--epochs',
      '100',
      '--optimizer',
      'sgd',
      '--seed',
      '3',
      '--raw-targets',
    );
    expect(raw.code).toBe(1);
    expect(raw.err).toMatch(/training diverged at epoch \d+, batch \d+: .*; nothing saved \(.*diabetes-raw\.tendon not written\)/);
    expect(raw.err.trim().split('\n')).toHaveLength(1);
    expect(existsSync(rawOut)).toBe(false);
  });

  it('tune -o naming the input model is refused before any work, whatever path names it (same path, another spelling, a symbolic link, a hard link)', async () => {
    const data = iris();
    const csv = writeCsv(dir, 'iris-all.csv', data);
    const spec = writeSpec('iris-o.json', specOf(4, [8], 3, 'softmax', ['setosa', 'versicolor', 'virginica']));
    const model = join(dir, 'iris-o.tendon');
    expect((await runCli('tune', spec, '--data', csv, '--target', 'species', '-o', model, '--epochs', '2')).code).toBe(0);
    const before = readFileSync(model);
    symlinkSync(model, join(dir, 'iris-o-link.tendon'));
    linkSync(model, join(dir, 'iris-o-hard.tendon'));
    const names = [model, join(dir, '.', 'iris-o.tendon'), join(dir, 'iris-o-link.tendon'), join(dir, 'iris-o-hard.tendon')];
    for (const out of names) {
      const r = await runCli('tune', model, '--data', csv, '--target', 'species', '-o', out, '--epochs', '2', '--log', 'text');
      expect(r.code, out).toBe(2);
      expect(r.err).toMatch(/^tendon: -o: .* is the input model .*tune never modifies its inputs/);
      expect(r.out).toBe(''); // refused before the run started
    }
    expect(readFileSync(model).equals(before)).toBe(true);
    const spec2 = await runCli('tune', spec, '--data', csv, '--target', 'species', '-o', spec, '--epochs', '2');
    expect(spec2.code).toBe(2);
    expect(spec2.err).toMatch(/is the spec/);
  });

  it("breast cancer (Street, Wolberg and Mangasarian 1993): drift flags nothing on the model's own training file, and flags the one feature offset by 4 training sd", async () => {
    const data = breastCancer();
    const csv = writeCsv(dir, 'cancer.csv', data);
    const spec = writeSpec('cancer.json', specOf(30, [16], 2, 'softmax', ['malignant', 'benign']));
    const model = join(dir, 'cancer.tendon');
    const tuned = await runCli('tune', spec, '--data', csv, '--target', 'diagnosis', '-o', model, '--epochs', '10', '--holdout', '0.2');
    expect(tuned.code, tuned.err).toBe(0);
    const own = await runCli('score', model, '--input', csv, '--output', join(dir, 'cancer-own.csv'), '--drift');
    expect(own.code, own.err).toBe(0);
    expect(own.err).toMatch(/a feature drifts when its incoming mean moves more than 3 training sd/);
    expect(own.err).toMatch(/no feature has drifted/);
    // The same file with one feature moved by 4 of its training standard deviations.
    const doc = (await readModelFile(model)).doc;
    const norm = doc.normalise!;
    if (norm.method !== 'zscore') throw new Error('zscore expected');
    const c = data.header.indexOf('mean texture');
    const shifted = data.rows.map((r) => r.map((cell, i) => (i === c ? String(Number(cell) + 4 * norm.std![c]) : cell)));
    const moved = writeCsv(dir, 'cancer-shifted.csv', data, shifted);
    const drift = await runCli('score', model, '--input', moved, '--output', join(dir, 'cancer-moved.csv'), '--drift');
    expect(drift.code).toBe(0);
    expect(drift.err).toMatch(/1 feature has drifted \(mean texture\)/);
  });

  it('breast cancer (Street, Wolberg and Mangasarian 1993): a packed model without feature names learns them from the header when tuned, so it scores a file that still holds the diagnosis column', async () => {
    const data = breastCancer();
    const csv = writeCsv(dir, 'cancer-packed.csv', data);
    const spec = writeSpec('cancer-packed.json', specOf(30, [16], 2, 'softmax', ['malignant', 'benign']));
    const packed = join(dir, 'cancer-packed.tendon');
    const pack = await runCli('pack', spec, '-o', packed, '--seed', '3');
    expect(pack.code, pack.err).toBe(0);
    // Before tuning: no names, so the extra column is refused with a hint that says what to do.
    const refused = await runCli('score', packed, '--input', csv, '--output', join(dir, 'cancer-refused.csv'));
    expect(refused.code).toBe(2);
    expect(refused.err).toMatch(/has 31 columns, but the model takes 30 inputs.*no feature names: remove the other columns/);
    expect(refused.err.trim().split('\n')).toHaveLength(1);
    const model = join(dir, 'cancer-named.tendon');
    const tuned = await runCli('tune', packed, '--data', csv, '--target', 'diagnosis', '-o', model, '--epochs', '5');
    expect(tuned.code, tuned.err).toBe(0);
    expect((await readModelFile(model)).doc.features).toEqual(data.header.slice(0, 30));
    const scored = await runCli('score', model, '--input', csv, '--output', join(dir, 'cancer-named-scores.csv'));
    expect(scored.code, scored.err).toBe(0);
    expect(readOutputs(join(dir, 'cancer-named-scores.csv')).rows).toHaveLength(data.rows.length);
    // The same rows as .npy with the target as its last column (as numpy users often save them):
    // no names to match, so refused with what to do, never read with the target as a feature.
    const npy = join(dir, 'cancer-with-target.npy');
    await writeNpy(npy, Float32Array.from(data.rows.flatMap((r) => r.map((c) => (c === 'malignant' ? 0 : c === 'benign' ? 1 : Number(c))))), [
      data.rows.length,
      31,
    ]);
    const npyRefused = await runCli('score', model, '--input', npy, '--output', join(dir, 'cancer-npy.csv'));
    expect(npyRefused.code).toBe(2);
    expect(npyRefused.err).toMatch(
      /cancer-with-target\.npy:1: has 31 columns, but the model takes 30 inputs.*without column names must hold exactly the 30 inputs.*a\[:, :30\]/,
    );
  });

  it('wine (Forina et al., UCI): the JSONL log and the text log name the same best epoch, counted from 1', async () => {
    const data = wine();
    const csv = writeCsv(dir, 'wine.csv', data);
    const spec = writeSpec('wine.json', specOf(13, [16], 3, 'softmax', ['class_0', 'class_1', 'class_2']));
    const args = [
      'tune',
      spec,
      '--data',
      csv,
      '--target',
      'cultivar',
      '--epochs',
      '150',
      '--holdout',
      '0.3',
      '--stop-after',
      '3',
      '--lr',
      '0.05',
      '--seed',
      '4',
    ];
    const jsonl = await runCli(...args, '-o', join(dir, 'wine-a.tendon'), '--log', 'jsonl');
    const text = await runCli(...args, '-o', join(dir, 'wine-b.tendon'), '--log', 'text');
    expect(jsonl.code, jsonl.err).toBe(0);
    expect(text.code, text.err).toBe(0);
    const records = jsonl.out
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    const epochs = records.filter((r) => 'epoch' in r && 'holdout' in r);
    const best = epochs.reduce((a, b) => (b.holdout.loss < a.holdout.loss ? b : a));
    const saved = records.find((r) => 'saved' in r);
    expect(saved.bestEpoch).toBe(best.epoch);
    expect(epochs[0].epoch).toBe(1);
    expect(saved.stoppedEarly).toBe(true);
    expect(saved.bestEpoch).toBe(epochs.length - 3); // three epochs without a better hold-out loss followed it
    expect(text.out).toContain(`weights from epoch ${saved.bestEpoch} (stopped early)`);
    // Held-out accuracy of the best epoch; measured 0.96 (the issue reports 0.98 on wine).
    expect(best.holdout.accuracy).toBeGreaterThanOrEqual(0.9);
  });

  it('wine: option errors from the command line name the flags (--stop-after, --holdout-file), not the API options', async () => {
    const data = wine();
    const csv = writeCsv(dir, 'wine-opts.csv', data);
    const spec = writeSpec('wine-opts.json', specOf(13, [8], 3, 'softmax', ['class_0', 'class_1', 'class_2']));
    const r = await runCli('tune', spec, '--data', csv, '--target', 'cultivar', '-o', join(dir, 'wine-opts.tendon'), '--stop-after', '3');
    expect(r.code).toBe(2);
    expect(r.err.trim()).toBe(
      'tendon: --stop-after: early stopping needs hold-out rows (--holdout or --holdout-file) (hint: tendon tune --help lists its options)',
    );
    const decay = await runCli('tune', spec, '--data', csv, '--target', 'cultivar', '-o', join(dir, 'wine-opts.tendon'), '--weight-decay', '-1');
    expect(decay.code).toBe(2);
    expect(decay.err).toMatch(/^tendon: --weight-decay: must be in/);
  });

  it('Iris: freezing every layer that has weights (dropout in between has none) is refused before any epoch', async () => {
    const data = iris();
    const csv = writeCsv(dir, 'iris-freeze.csv', data);
    const spec = writeSpec('iris-freeze.json', {
      inputs: 4,
      normalise: { method: 'zscore' },
      labels: ['setosa', 'versicolor', 'virginica'],
      layers: [
        { kind: 'dense', size: 8, activation: 'relu' },
        { kind: 'dropout', rate: 0.1 },
        { kind: 'dense', size: 3, activation: 'softmax' },
      ],
    });
    const r = await runCli('tune', spec, '--data', csv, '--target', 'species', '-o', join(dir, 'iris-frozen.tendon'), '--freeze', '0,2', '--log', 'text');
    expect(r.code).toBe(2);
    expect(r.err.trim()).toBe('tendon: --freeze: every layer with weights (0, 2) is frozen: nothing would train (hint: tendon tune --help lists its options)');
    expect(existsSync(join(dir, 'iris-frozen.tendon'))).toBe(false);
  });

  it('about wraps 30 breast-cancer feature names under the label and abbreviates the 64 digits pixels', async () => {
    const cancer = breastCancer();
    const csv = writeCsv(dir, 'cancer-about.csv', cancer);
    const spec = writeSpec('cancer-about.json', specOf(30, [4], 2, 'softmax', ['malignant', 'benign']));
    const model = join(dir, 'cancer-about.tendon');
    expect((await runCli('tune', spec, '--data', csv, '--target', 'diagnosis', '-o', model, '--epochs', '1')).code).toBe(0);
    const shown = (await runCli('about', model)).out.split('\n');
    const first = shown.findIndex((l) => l.startsWith('inputs 30: mean radius, '));
    expect(first).toBeGreaterThan(0);
    const block = [shown[first]];
    for (let i = first + 1; shown[i].startsWith(' '.repeat('inputs 30: '.length)); i++) block.push(shown[i]);
    expect(block.length).toBeGreaterThan(1);
    for (const line of block) expect(line.length).toBeLessThanOrEqual(100);
    expect(
      block
        .join(' ')
        .split(/,\s*/)
        .map((s) => s.replace('inputs 30: ', '').trim()),
    ).toEqual(cancer.header.slice(0, 30));

    const digitsData = digits();
    const dcsv = writeCsv(dir, 'digits-about.csv', digitsData, digitsData.rows.slice(0, 200));
    const dspec = writeSpec('digits-about.json', specOf(64, [4], 10, 'softmax'));
    const dmodel = join(dir, 'digits-about.tendon');
    expect((await runCli('tune', dspec, '--data', dcsv, '--target', 'digit', '-o', dmodel, '--epochs', '1')).code).toBe(0);
    const line = (await runCli('about', dmodel)).out.split('\n').find((l) => l.startsWith('inputs 64'))!;
    expect(line).toBe('inputs 64: pixel_0_0, pixel_0_1, pixel_0_2, pixel_0_3, pixel_0_4, pixel_0_5, ... pixel_7_6, pixel_7_7 (56 more between; all in --json)');
  });

  it('Linnerud (Tenenhaus 1998): a three-target regression model gets no top-class figure from about --costs or shrink, but its largest output change', async () => {
    const data = linnerud();
    const csv = writeCsv(dir, 'linnerud.csv', data);
    const spec = writeSpec('linnerud.json', { ...specOf(3, [8], 3, 'linear'), labels: ['Weight', 'Waist', 'Pulse'] });
    const model = join(dir, 'linnerud.tendon');
    const tuned = await runCli('tune', spec, '--data', csv, '--target', 'Weight,Waist,Pulse', '-o', model, '--epochs', '50', '--batch', '4');
    expect(tuned.code, tuned.err).toBe(0);
    const costs = await runCli('about', model, '--costs');
    expect(costs.code).toBe(0);
    expect(costs.out).toMatch(/targets scaled inside the model/);
    expect(costs.out).not.toMatch(/top class/);
    expect(costs.out).toMatch(/max abs err/);
    const shrunk = await runCli('shrink', model, '--store', 'i8', '-o', join(dir, 'linnerud-i8.tendon'));
    expect(shrunk.code, shrunk.err).toBe(0);
    expect(shrunk.out).not.toMatch(/top class/);
    expect(shrunk.out).toMatch(/max abs err \S+, max rel err \S+; (within|BROKEN)/);
  });
});
