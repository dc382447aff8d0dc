/**
 * `tendon shrink --store i8 --calibrate ROWS --rows ROWS` and `tendon check --engine int8
 * --against PARENT` on real files: the optical digits set (Alpaydin and Kaynak, UCI;
 * python3-sklearn sklearn/datasets/data/digits.csv.gz, copied to test/fixtures/realdata), split
 * 70/30 and written as users write it (CSV with a header, the class as a named column).
 */
import { readFileSync } from 'node:fs';
import { beforeAll, describe, expect, it } from 'vitest';
import { topClassAgreement } from '../../src/check/index.js';
import { Int8Runner } from '../../src/engine/int8/int8-runner.js';
import { readModelFile, writeModelFile } from '../../src/format/index.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { runCli } from '../cli/run-cli.js';
import { datasetTable, loadDataset, splitRows, workFolder, writeCsv, writeSpec } from '../realdata/prepare.js';

const path = workFolder();
const ds = loadDataset('digits');
const split = splitRows(ds.x.length, 0.3, 1);
const trainCsv = path('digits-train.csv');
const testCsv = path('digits-test.csv');
const parent = path('digits.tendon');
const child = path('digits-i8.tendon');
let shrinkOut = '';

beforeAll(async () => {
  writeCsv(trainCsv, ...(Object.values(datasetTable(ds, { rows: split.train })) as [string[], string[][]]));
  writeCsv(testCsv, ...(Object.values(datasetTable(ds, { rows: split.test })) as [string[], string[][]]));
  const spec = writeSpec(path('digits.json'), ds, [64, 32]);
  const tuned = await runCli('tune', spec, '--data', trainCsv, '--target', 'target', '-o', parent, '--epochs', '15', '--seed', '1', '--engine', 'js');
  if (tuned.code !== 0) throw new Error(tuned.err);
  const shrunk = await runCli('shrink', parent, '--store', 'i8', '--calibrate', trainCsv, '--rows', testCsv, '-o', child);
  if (shrunk.code !== 0) throw new Error(shrunk.err);
  shrinkOut = shrunk.out;
}, 300_000);

/** The held-out rows as the model reads them (its feature columns). */
function heldOut(): Float32Array {
  return Float32Array.from(split.test.flatMap((r) => ds.x[r]));
}

describe('shrink --store i8 --calibrate ROWS --rows ROWS', () => {
  it('stores one activation range per dense layer, recorded on every training row, as format 1.2', async () => {
    const { doc, version } = await readModelFile(child);
    expect(version).toEqual({ major: 1, minor: 2 });
    expect(doc.activationRanges!.rows).toBe(split.train.length);
    expect(doc.activationRanges!.min.length).toBe(3);
    expect(shrinkOut).toContain(`int8 activation ranges from ${split.train.length} rows of ${trainCsv}`);
    const about = await runCli('about', child);
    expect(about.out).toMatch(/ format 1\.2 /);
    expect(about.out).toContain("int8 activation ranges from 1,258 rows (each dense layer's input): layers[0] [-");
    // After a ReLU a layer's input starts at 0.
    expect(about.out).toMatch(/layers\[1\] \[0, [\d.]+\],\s+layers\[2\] \[0, [\d.]+\]/);
  });

  it('judges the shrunk model on the held-out rows: top-class agreement and largest probability change, on the reference path and as the int8 engine runs it', async () => {
    expect(shrinkOut).toContain(`against ${split.test.length} rows of ${testCsv}:`);
    expect(shrinkOut).not.toContain('random');
    const engineLine = shrinkOut.split('\n').find((l) => l.includes('on the int8 engine (activations on the stored ranges)'))!;
    expect(engineLine).toMatch(/top class agrees on [\d.]+% of rows, largest probability change \S+/);
    // The same figure computed here, apart from the command: the int8 engine against the parent's float64 reference.
    const [p, c] = [(await readModelFile(parent)).doc, (await readModelFile(child)).doc];
    const x = heldOut();
    const rows = split.test.length;
    const runner = new Int8Runner(c);
    const agree = topClassAgreement(runner.run(x, rows), referenceForward(p, toMat64(x, rows, 64)).y.data, rows, 10);
    runner.dispose();
    expect(engineLine).toContain(`top class agrees on ${(agree * 100).toFixed(2)}% of rows`);
    expect(agree).toBeGreaterThanOrEqual(0.98);
  });

  it('without --rows it judges on seeded random rows and says they are not representative', async () => {
    const r = await runCli('shrink', parent, '--store', 'i8', '-o', path('digits-i8-plain.tendon'));
    expect(r.code, r.err).toBe(0);
    expect(r.out).toContain("seeded random rows (random inputs are not representative of a trained model's inputs; judge it on real rows with --rows FILE)");
    expect((await readModelFile(path('digits-i8-plain.tendon'))).doc.activationRanges).toBeUndefined();
  });

  it('refuses --calibrate without i8 storage, and calibration rows the model cannot read, in one line with exit 2', async () => {
    const f16 = await runCli('shrink', parent, '--store', 'f16', '--calibrate', trainCsv, '-o', path('x.tendon'));
    expect(f16.code).toBe(2);
    expect(f16.err.trim().split('\n')).toEqual([
      'tendon: --calibrate: stores activation ranges for the int8 engine: it needs --store i8, got --store f16 (hint: tendon shrink --help lists its options)',
    ]);
    const wrong = path('wrong.csv');
    writeCsv(wrong, ['a', 'b'], [['1', '2']]);
    const r = await runCli('shrink', parent, '--store', 'i8', '--calibrate', wrong, '-o', path('y.tendon'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/wrong\.csv:1: missing feature columns/);
    expect(r.err).not.toMatch(/\n\s+at /);
  });
});

describe('score on a calibrated i8 file', () => {
  it("auto runs the int8 engine on the stored ranges and says so; the scores are that engine's answers", async () => {
    const scores = path('digits-scores.csv');
    const r = await runCli('score', child, '--input', testCsv, '--output', scores);
    expect(r.code, r.err).toBe(0);
    expect(r.err).toMatch(/on the int8 engine \(.*; activations on the stored ranges \(recorded on 1258 rows\)\)/);
    const lines = readFileSync(scores, 'utf8').trim().split('\n').slice(1);
    const runner = new Int8Runner((await readModelFile(child)).doc);
    const want = runner.run(heldOut(), split.test.length);
    runner.dispose();
    expect(lines).toHaveLength(split.test.length);
    lines.slice(0, 20).forEach((line, row) => {
      line.split(',').forEach((cell, col) => expect(Number(cell)).toBeCloseTo(want[row * 10 + col], 5));
    });
  });
});

describe('check --engine int8 --against PARENT', () => {
  it('runs MODEL on the int8 engine against the float32 parent: agreement, largest probability change, PASS', async () => {
    const r = await runCli('check', child, '--engine', 'int8', '--against', parent, '--input', testCsv);
    expect(r.code, r.out + r.err).toBe(0);
    expect(r.out).toMatch(/on the int8 engine \(.*; activations on the stored ranges \(recorded on 1258 rows\)\) against/);
    expect(r.out).toMatch(/top class agrees on [\d.]+% of rows, largest probability change \S+/);
    expect(r.out).toMatch(/^PASS: both parts within their bounds$/m);
    const json = JSON.parse((await runCli('check', child, '--engine', 'int8', '--against', parent, '--input', testCsv, '--json')).out);
    expect(json.engine).toBe('int8');
    expect(json.run.rows).toBe(split.test.length);
    expect(json.run.topClassAgreement).toBeGreaterThanOrEqual(0.98);
    expect(json.pass).toBe(true);
  });

  it('fails (exit 1) when the int8 model has a wrong output bias', async () => {
    const { doc } = await readModelFile(child);
    const last = doc.layers[doc.layers.length - 1];
    if (last.kind !== 'dense') throw new Error('dense expected');
    last.bias[3] += 2;
    const bad = path('digits-i8-bad.tendon');
    await writeModelFile(bad, doc);
    const r = await runCli('check', bad, '--engine', 'int8', '--against', parent, '--input', testCsv);
    expect(r.code).toBe(1);
    expect(r.out).toMatch(/^FAIL: a bound is broken$/m);
  });

  it('without --engine, --against stays on the reference path for both (as before)', async () => {
    const r = await runCli('check', child, '--against', parent, '--input', testCsv);
    expect(r.code, r.out).toBe(0);
    expect(r.out).toContain('float64 reference path for both');
  });
});

describe('shrink --rows on a regression model (diabetes, Efron, Hastie, Johnstone and Tibshirani 2004; python3-sklearn)', () => {
  it('judges per-value error in target units on the held-out rows, on the reference path and on the int8 engine', async () => {
    const data = loadDataset('diabetes');
    const parts = splitRows(data.x.length, 0.3, 2);
    const train = writeCsv(path('diabetes-train.csv'), ...(Object.values(datasetTable(data, { rows: parts.train })) as [string[], string[][]]));
    const held = writeCsv(path('diabetes-test.csv'), ...(Object.values(datasetTable(data, { rows: parts.test })) as [string[], string[][]]));
    const model = path('diabetes.tendon');
    const tuned = await runCli(
      'tune',
      writeSpec(path('diabetes.json'), data, [16]),
      '--data',
      train,
      '--target',
      'target',
      '-o',
      model,
      '--epochs',
      '30',
      '--seed',
      '1',
    );
    expect(tuned.code, tuned.err).toBe(0);
    const out = path('diabetes-i8.tendon');
    const r = await runCli('shrink', model, '--store', 'i8', '--calibrate', train, '--rows', held, '-o', out);
    expect(r.code, r.err).toBe(0);
    expect(r.out).not.toMatch(/top class|probability/);
    const stored = r.out.split('\n').find((l) => l.includes('stored weights (float64 path for both)'))!;
    const engine = r.out.split('\n').find((l) => l.includes('on the int8 engine (activations on the stored ranges)'))!;
    expect(engine).toMatch(/per-value error: max abs err \S+, max rel err \S+/);
    // The stated figure, recomputed here: the largest |child - parent| over the held-out rows in target units.
    const [p, c] = [(await readModelFile(model)).doc, (await readModelFile(out)).doc];
    const x = Float32Array.from(parts.test.flatMap((i) => data.x[i]));
    const a = referenceForward(c, toMat64(x, parts.test.length, 10)).y.data;
    const b = referenceForward(p, toMat64(x, parts.test.length, 10)).y.data;
    const maxAbs = a.reduce((m, v, i) => Math.max(m, Math.abs(v - b[i])), 0);
    expect(stored).toContain(`per-value error: max abs err ${maxAbs >= 1e-3 && maxAbs < 1e5 ? maxAbs.toPrecision(3) : maxAbs.toExponential(2)},`);
    // Target scaling makes the file major 2.
    expect((await readModelFile(out)).version.major).toBe(2);
  });
});
