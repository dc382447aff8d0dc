/**
 * The CLI contract, end to end in-process: pack / about / score / check on a model built from
 * .npy files that NumPy wrote (test/fixtures/cli/make-mazur-npy.py), one-line errors and exit codes.
 */
import { mkdtemp, readFile, writeFile, copyFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { readModelFile } from '../../src/format/index.js';
import { runCli } from './run-cli.js';

const fixtures = join(import.meta.dirname, '..', 'fixtures', 'cli');
let dir: string;
let model: string;

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-cli-'));
  for (const f of ['mazur-spec.json', 'mazur-w1.npy', 'mazur-b1.npy', 'mazur-w2.npy', 'mazur-b2.npy', 'mazur-w2-fortran.npy']) {
    await copyFile(join(fixtures, f), join(dir, f));
  }
  model = join(dir, 'mazur.tendon');
  const packed = await runCli('pack', join(dir, 'mazur-spec.json'), '-o', model);
  expect(packed.err).toBe('');
  expect(packed.code).toBe(0);
});

describe('tendon pack / about / score / check on NumPy-written tensors', () => {
  it('score reproduces the forward pass of Mazur 2015 (out_o1 = 0.75136507, out_o2 = 0.772928465)', async () => {
    const input = join(dir, 'in.csv');
    const output = join(dir, 'out.csv');
    await writeFile(input, 'i2,i1\n0.10,0.05\n0.10,0.05\n');
    const r = await runCli('score', model, '--input', input, '--output', output, '--engine', 'js');
    expect(r.code).toBe(0);
    const lines = (await readFile(output, 'utf8')).trim().split('\n');
    expect(lines[0]).toBe('o1,o2');
    expect(lines).toHaveLength(3);
    const [o1, o2] = lines[1].split(',').map(Number);
    // Worked example values, to float32 precision (columns were matched by name: i2 came first).
    expect(o1).toBeCloseTo(0.75136507, 6);
    expect(o2).toBeCloseTo(0.772928465, 6);
  });

  it('score ignores columns the model does not read, even when they are not numbers (IDs, labels)', async () => {
    const input = join(dir, 'extra.csv');
    const output = join(dir, 'extra-out.csv');
    await writeFile(input, 'loaf,i2,note,i1\nA-17,0.10,"crust, dark",0.05\n');
    const r = await runCli('score', model, '--input', input, '--output', output, '--engine', 'js');
    expect(r.code).toBe(0);
    const [o1] = (await readFile(output, 'utf8')).trim().split('\n')[1].split(',').map(Number);
    expect(o1).toBeCloseTo(0.75136507, 6); // Mazur 2015
  });

  it('score writes .jsonl and .npy outputs with one row per input row', async () => {
    const input = join(dir, 'in.jsonl');
    await writeFile(input, '{"i1": 0.05, "i2": 0.10}\n[0.05, 0.10]\n'.split('\n')[0] + '\n{"i1": 0.05, "i2": 0.10}\n');
    const out = join(dir, 'out.jsonl');
    expect((await runCli('score', model, '-i', input, '-o', out, '--engine', 'js')).code).toBe(0);
    const rows = (await readFile(out, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    expect(rows).toHaveLength(2);
    expect(rows[0].o1).toBeCloseTo(0.75136507, 6);
  });

  it('about names layers, shapes, parameter count and checksum; --json is machine-readable', async () => {
    const text = await runCli('about', model);
    expect(text.code).toBe(0);
    expect(text.out).toContain('sigmoid');
    expect(text.out).toMatch(/checksum [0-9a-f]{8}/);
    // 2x2 weights + 2 biases per layer, two layers; no batchnorm, so nothing held fixed.
    expect(text.out).toMatch(/^12 weights to learn$/m);
    const json = JSON.parse((await runCli('about', model, '--json')).out);
    // 2x2 weights + 2 biases, twice.
    expect(json.parameters).toBe(12);
    expect(json.layers.map((l: { tensors: { shape: number[] }[] }) => l.tensors[0].shape)).toEqual([
      [2, 2],
      [2, 2],
    ]);
    expect(json.features).toEqual(['i1', 'i2']);
  });

  it('check passes and reports per-layer errors within the float32 tolerance', async () => {
    const r = await runCli('check', model, '--json', '--engine', 'js');
    expect(r.code).toBe(0);
    const report = JSON.parse(r.out);
    expect(report.pass).toBe(true);
    expect(report.layers).toHaveLength(2);
    expect(report.output.maxAbs).toBeLessThan(report.tolerance.abs);
  });
});

describe('tendon check when float32 cannot keep up', () => {
  it('exits 1 and points at the layer when catastrophic cancellation breaks the tolerance (common practice)', async () => {
    // y = 3e7·a - 3e7·b with a = 1.1, b = 1.0999999 (as float32): the exact answer is about
    // 3.58, but each product near 3.3e7 can only be held to a spacing of 2 in float32, so the
    // kernel's answer is off by about 0.7 (fused multiply-add) or 1.6 (separate rounding).
    const spec = join(dir, 'cancel.json');
    await writeFile(spec, JSON.stringify({ inputs: 2, layers: [{ kind: 'dense', size: 1, activation: 'linear', weight: [[3e7], [-3e7]], bias: [0] }] }));
    const m = join(dir, 'cancel.tendon');
    expect((await runCli('pack', spec, '-o', m)).code).toBe(0);
    const rows = join(dir, 'cancel.csv');
    await writeFile(rows, 'a,b\n1.1,1.0999999\n');
    const r = await runCli('check', m, '--input', rows, '--engine', 'fast', '--json');
    expect(r.code).toBe(1);
    const report = JSON.parse(r.out);
    expect(report.pass).toBe(false);
    expect(report.layers[0].maxAbs).toBeGreaterThan(0.5);
    expect(report.layers[0].maxAbs).toBeLessThan(2);
  });
});

describe('one-line errors and exit codes', () => {
  const cases: [string, () => string[], RegExp, number][] = [
    ['unknown command', () => ['frobnicate'], /unknown command "frobnicate"/, 2],
    ['unknown flag', () => ['about', model, '--colour'], /--colour: unknown option/, 2],
    ['missing -o', () => ['pack', join(dir, 'mazur-spec.json')], /--out: is required/, 2],
    ['model file missing', () => ['about', join(dir, 'nope.tendon')], /nope\.tendon/, 2],
    ['bad number flag', () => ['score', model, '-i', 'x.csv', '-o', 'y.csv', '--batch', 'ten'], /--batch: expected a number/, 2],
  ];
  it.each(cases)('%s', async (_name, argv, pattern, code) => {
    const r = await runCli(...argv());
    expect(r.code).toBe(code);
    expect(r.err).toMatch(pattern);
    expect(r.err.trim().split('\n')).toHaveLength(1);
    expect(r.err).not.toMatch(/\n\s+at /);
  });

  it('a corrupt model file names the problem (CRC mismatch) with exit 2', async () => {
    const bytes = await readFile(model);
    bytes[bytes.length - 3] ^= 0xff;
    const bad = join(dir, 'corrupt.tendon');
    await writeFile(bad, bytes);
    const r = await runCli('about', bad);
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/corrupt\.tendon/);
    expect(r.err.toLowerCase()).toMatch(/crc|checksum/);
  });

  it('a truncated model file is refused with exit 2', async () => {
    const bytes = await readFile(model);
    const bad = join(dir, 'short.tendon');
    await writeFile(bad, bytes.subarray(0, 40));
    const r = await runCli('score', bad, '-i', 'x.csv', '-o', join(dir, 'y.csv'));
    expect(r.code).toBe(2);
    expect(r.err.trim().split('\n')).toHaveLength(1);
  });

  it('a malformed CSV row is reported with file, line and column, exit 2, and no output file', async () => {
    const input = join(dir, 'bad.csv');
    await writeFile(input, 'i1,i2\n0.05,0.10\n0.05,abc\n');
    const output = join(dir, 'bad-out.csv');
    const r = await runCli('score', model, '-i', input, '-o', output, '--engine', 'js');
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/bad\.csv:3:2/);
    await expect(readFile(output)).rejects.toThrow();
  });

  it('a spec with several problems reports them all at once', async () => {
    const spec = join(dir, 'bad-spec.json');
    await writeFile(
      spec,
      JSON.stringify({
        inputs: 2,
        layers: [
          { kind: 'dense', size: 0, activation: 'swish' },
          { kind: 'dropout', rate: 2 },
        ],
      }),
    );
    const r = await runCli('pack', spec, '-o', join(dir, 'x.tendon'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/layers\[0\]\.size/);
    expect(r.err).toMatch(/layers\[0\]\.activation/);
    expect(r.err).toMatch(/layers\[1\]\.rate/);
  });

  it('a spec whose JSON is broken points at the line and column', async () => {
    const spec = join(dir, 'broken.json');
    await writeFile(spec, '{\n  "inputs": 2,\n  "layers": [,]\n}\n');
    const r = await runCli('pack', spec, '-o', join(dir, 'x.tendon'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/broken\.json:3:\d+: invalid JSON/);
  });

  it('a Fortran-order .npy tensor is read in C order: the same model as the C-order file (NEP 1)', async () => {
    const spec = join(dir, 'fortran-spec.json');
    const s = JSON.parse(await readFile(join(dir, 'mazur-spec.json'), 'utf8'));
    s.layers[1].weight = 'mazur-w2-fortran.npy';
    await writeFile(spec, JSON.stringify(s));
    const fortran = join(dir, 'fortran.tendon');
    const plain = join(dir, 'plain.tendon');
    expect((await runCli('pack', spec, '-o', fortran)).code).toBe(0);
    expect((await runCli('pack', join(dir, 'mazur-spec.json'), '-o', plain)).code).toBe(0);
    const [a, b] = await Promise.all([readModelFile(fortran), readModelFile(plain)]);
    const w = (m: typeof a): number[] => Array.from((m.doc.layers[1] as { weight: Float32Array }).weight);
    // make-mazur-npy.py: W2 = [[0.40, 0.50], [0.45, 0.55]] (Mazur 2015), in both memory orders.
    expect(w(a)).toEqual(w(b));
    expect(w(a)).toEqual([0.4, 0.5, 0.45, 0.55].map(Math.fround));
  });
});
