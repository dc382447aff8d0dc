// The integer engine end to end: against the float64 reference on the stored (dequantised)
// weights within the bound derived in src/check/tolerance.ts, against its float32 parent on
// seeded inputs, threads against one thread, and the refusals.
import { describe, expect, it } from 'vitest';
import { docOf, dropoutOf, minmaxOf, randomBatchNorm, randomDense, zscoreOf } from '../fixtures/models.js';
import { int8ParityReport, parityReport, randomInputs, topClassAgreement } from '../../src/check/index.js';
import { SimdRunner } from '../../src/engine/fast/simd-runner.js';
import { ThreadedFastRunner } from '../../src/engine/fast/threaded-runner.js';
import { openRunner } from '../../src/engine/runner.js';
import { Int8Runner } from '../../src/engine/int8/int8-runner.js';
import { availableInt8Ariths, MAX_INT8_INPUTS, type Int8Arith } from '../../src/engine/int8/kernels.js';
import { SharedMemoryRunner } from '../../src/engine/shared-memory-runner.js';
import { ModelFileError } from '../../src/errors.js';
import { storedCodesOf } from '../../src/format/int8.js';
import { ACTIVATIONS, SeededRng, type Layer, type ModelDoc } from '../../src/model/index.js';
import { shrinkModel } from '../../src/transform/shrink.js';

const ARITHS: Int8Arith[] = availableInt8Ariths();

function i8Of(doc: ModelDoc): ModelDoc {
  return shrinkModel(doc, 'i8', { at: '2026-01-01T00:00:00Z' });
}

describe.each(ARITHS)('Int8Runner (%s)', (arith) => {
  it.each([...ACTIVATIONS])('within the derived int8 bound of the float64 reference, every layer, %s, batchnorm and dropout mixed in', (activation) => {
    const rng = new SeededRng(activation.length * 7 + 11);
    const layers: Layer[] = [
      randomDense(rng, 20, 40, activation),
      randomBatchNorm(rng, 40),
      dropoutOf(0.3),
      randomDense(rng, 40, 33, 'relu'),
      randomDense(rng, 33, 5, activation),
    ];
    const doc = i8Of(docOf(20, layers, activation.length % 2 ? zscoreOf(rng, 20) : minmaxOf(rng, 20)));
    const session = new Int8Runner(doc, { arith });
    const report = int8ParityReport(doc, randomInputs(doc, 61, 3), 61, session);
    session.dispose();
    expect(report.pass, JSON.stringify(report.layers)).toBe(true);
    // Not trivially loose: the errors are real (the engine is not secretly float32) and inside the bound.
    expect(report.output.maxAbs).toBeGreaterThan(0);
    expect(report.output.maxAbs).toBeLessThanOrEqual(report.tolerance.abs);
  });

  // int8 itself moves these outputs by up to about 0.09 (measured), so the check cannot see an
  // error that small; an error of ordinary size (half a unit on one bias) it must.
  it('the bound catches a wrong answer: a bias off by 0.5 fails parity', () => {
    const rng = new SeededRng(3);
    const doc = i8Of(docOf(30, [randomDense(rng, 30, 20, 'relu'), randomDense(rng, 20, 4, 'linear')]));
    const wrong: ModelDoc = {
      ...doc,
      layers: doc.layers.map((l, i) => (i === 1 && l.kind === 'dense' ? { ...l, bias: l.bias.map((b, j) => (j === 2 ? b + 0.5 : b)) } : l)),
    };
    const session = new Int8Runner(wrong, { arith });
    const report = int8ParityReport(doc, randomInputs(doc, 32, 1), 32, session);
    session.dispose();
    expect(report.layers[1].pass).toBe(false);
  });

  it('runs the codes the file stored, not a second quantisation', () => {
    const rng = new SeededRng(9);
    const doc = i8Of(docOf(12, [randomDense(rng, 12, 8, 'relu'), randomDense(rng, 8, 3, 'linear')]));
    const layer = doc.layers[0];
    if (layer.kind !== 'dense') throw new Error('dense expected');
    expect(storedCodesOf(layer.weight, 12, 8)).not.toBeNull();
    expect(new Int8Runner(doc, { arith }).storedCodes).toBe(true);
    // A float32 document has no stored codes: explicitly asked for, it is quantised at open, and says so.
    const f32 = docOf(12, [randomDense(rng, 12, 8, 'relu')]);
    expect(new Int8Runner(f32, { arith }).storedCodes).toBe(false);
  });

  it('top class agrees with the float32 parent on >= 97% of 512 seeded rows (seeded inputs, not representative of real data)', () => {
    const rng = new SeededRng(21);
    const parent = docOf(64, [randomDense(rng, 64, 128, 'relu'), randomDense(rng, 128, 64, 'relu'), randomDense(rng, 64, 10, 'softmax')], zscoreOf(rng, 64));
    const x = randomInputs(parent, 512, 5);
    const fast = new SimdRunner(parent).run(x, 512);
    const session = new Int8Runner(i8Of(parent), { arith });
    const y = session.run(x, 512);
    session.dispose();
    expect(topClassAgreement(y, fast, 512, 10)).toBeGreaterThanOrEqual(0.97);
  });

  // Wide then narrow layers and many rows: each thread reuses the activation buffers with every
  // layer's own stride, so a thread a layer ahead would overwrite the other's rows if their regions
  // overlapped (they did once: a third of the rows came out wrong).
  it('two threads give the same bits as one on wide-then-narrow layers, 2000 rows', async () => {
    const rng = new SeededRng(40);
    const doc = i8Of(
      docOf(300, [randomDense(rng, 300, 256, 'relu'), randomDense(rng, 256, 128, 'relu'), randomDense(rng, 128, 10, 'softmax')], zscoreOf(rng, 300)),
    );
    const rows = 2000;
    const x = randomInputs(doc, rows, 9);
    const one = new Int8Runner(doc, { arith });
    const two = new Int8Runner(doc, { arith, threads: 2 });
    await two.ready();
    const a = one.run(x, rows);
    for (let round = 0; round < 3; round++) expect(Buffer.from(two.run(x, rows).buffer).equals(Buffer.from(a.buffer)), `round ${round}`).toBe(true);
    one.dispose();
    two.dispose();
  });

  it('two threads give the same bits as one, rows not a multiple of the tile, several chunks', async () => {
    const rng = new SeededRng(4);
    const doc = i8Of(
      docOf(
        50,
        [randomDense(rng, 50, 70, 'relu'), randomBatchNorm(rng, 70), randomDense(rng, 70, 30, 'tanh'), randomDense(rng, 30, 6, 'softmax')],
        zscoreOf(rng, 50),
      ),
    );
    const rows = 301;
    const x = randomInputs(doc, rows, 8);
    const one = new Int8Runner(doc, { arith, chunkRows: 128 });
    const two = new Int8Runner(doc, { arith, threads: 2, chunkRows: 128 });
    await two.ready();
    expect(two.threads).toBe(2);
    const a = one.run(x, rows);
    const b = two.run(x, rows);
    // A row alone gives the same bits as in a batch.
    const alone = one.run(x.subarray(37 * 50, 38 * 50), 1);
    one.dispose();
    two.dispose();
    expect(Buffer.from(b.buffer).equals(Buffer.from(a.buffer))).toBe(true);
    expect(Array.from(alone)).toEqual(Array.from(a.subarray(37 * 6, 38 * 6)));
  });
});

describe('shared-memory sessions', () => {
  it('float32 arithmetic on two threads: the same bits as one thread and as the fast engine within float32 tolerance', async () => {
    const rng = new SeededRng(12);
    const doc = docOf(40, [randomDense(rng, 40, 64, 'relu'), randomDense(rng, 64, 9, 'sigmoid')], minmaxOf(rng, 40));
    const x = randomInputs(doc, 200, 2);
    const one = new SharedMemoryRunner(doc, { arith: 'f32' });
    const two = new SharedMemoryRunner(doc, { arith: 'f32', threads: 2 });
    await two.ready();
    const a = one.run(x, 200);
    const b = two.run(x, 200);
    const fast = new SimdRunner(doc).run(x, 200);
    one.dispose();
    two.dispose();
    expect(Buffer.from(b.buffer).equals(Buffer.from(a.buffer))).toBe(true);
    fast.forEach((v, i) => expect(Math.abs(v - a[i])).toBeLessThan(1e-5));
  });

  it('float32 on two threads, wide-then-narrow layers, 2000 rows: the same bits as one thread', async () => {
    const rng = new SeededRng(41);
    const doc = docOf(300, [randomDense(rng, 300, 256, 'relu'), randomDense(rng, 256, 128, 'relu'), randomDense(rng, 128, 10, 'linear')]);
    const x = randomInputs(doc, 2000, 3);
    const one = new SharedMemoryRunner(doc, { arith: 'f32' });
    const two = new SharedMemoryRunner(doc, { arith: 'f32', threads: 2 });
    await two.ready();
    const a = one.run(x, 2000);
    for (let round = 0; round < 3; round++) expect(Buffer.from(two.run(x, 2000).buffer).equals(Buffer.from(a.buffer)), `round ${round}`).toBe(true);
    one.dispose();
    two.dispose();
  });

  it('openRunner on the fast engine with two threads: the shared-memory kernel, as SimdRunner within float32 parity, every layer', async () => {
    const rng = new SeededRng(77);
    const doc = docOf(
      50,
      [randomDense(rng, 50, 70, 'relu'), randomBatchNorm(rng, 70), dropoutOf(0.2), randomDense(rng, 70, 30, 'tanh'), randomDense(rng, 30, 4, 'softmax')],
      zscoreOf(rng, 50),
    );
    const x = randomInputs(doc, 777, 5);
    const threaded = openRunner(doc, 'fast', { threads: 2 });
    expect(threaded).toBeInstanceOf(ThreadedFastRunner);
    expect([threaded.engine, threaded.chunkRows]).toEqual(['fast', 512]);
    await (threaded as ThreadedFastRunner).ready();
    const single = openRunner(doc, 'fast');
    expect(single).toBeInstanceOf(SimdRunner);
    const a = threaded.run(x, 777);
    const b = single.run(x, 777);
    b.forEach((v, i) => expect(Math.abs(v - a[i])).toBeLessThan(1e-6));
    const report = parityReport(doc, x.subarray(0, 64 * 50), 64, { runner: threaded });
    expect([report.layers.length, report.pass]).toEqual([5, true]);
    threaded.dispose();
    expect(() => threaded.run(x, 1)).toThrow(/disposed/);
  });

  it('the fast engine on two threads gives the same bits as on one for dense ReLU / linear layers (same kernel, same order per row)', async () => {
    const rng = new SeededRng(78);
    const doc = docOf(64, [randomDense(rng, 64, 48, 'relu'), randomDense(rng, 48, 5, 'linear')]);
    const x = randomInputs(doc, 1000, 6);
    const threaded = openRunner(doc, 'fast', { threads: 2 });
    await (threaded as ThreadedFastRunner).ready();
    const a = threaded.run(x, 1000);
    const b = openRunner(doc, 'fast').run(x, 1000);
    threaded.dispose();
    expect(Buffer.from(a.buffer).equals(Buffer.from(b.buffer))).toBe(true);
  });

  it('a disposed session refuses to run', () => {
    const rng = new SeededRng(1);
    const s = new SharedMemoryRunner(docOf(4, [randomDense(rng, 4, 2, 'linear')]), { arith: 'f32', threads: 2 });
    s.dispose();
    expect(() => s.run(new Float32Array(4), 1)).toThrow(/disposed/);
  });
});

describe('refusals', () => {
  it(`a layer wider than ${MAX_INT8_INPUTS} inputs is refused by name with a typed error (32-bit sums could overflow)`, () => {
    const inputs = MAX_INT8_INPUTS + 1;
    const doc = docOf(inputs, [{ kind: 'dense', size: 1, activation: 'linear', alpha: 0, weight: new Float32Array(inputs), bias: new Float32Array(1) }]);
    let error: unknown = null;
    try {
      new Int8Runner(doc);
    } catch (e) {
      error = e;
    }
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as ModelFileError).message).toMatch(/layers\[0\] \(dense\): 266305 inputs .* more than the int8 engine accepts \(266304\)/);
  });
  // Zero, negative, NaN and infinite scales in a file: test/format/codec.test.ts (refused at open, by layer and tensor).
});
