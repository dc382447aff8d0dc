/**
 * Opt-in (TENDON_FASHION=1, and the Debian package dataset-fashion-mnist installed): a
 * 784-256-128-10 ReLU network trained in float32 on Fashion-MNIST (Xiao, Rasul, Vollgraf 2017,
 * arXiv:1708.07747, the package's IDX files), stored as i8 and run on the integer engine: on the
 * 10 000 test images it may lose at most 0.3 points of accuracy against its float32 parent and
 * must agree with the parent's top class on at least 99.5% of them. Then the same i8 model with
 * stored activation ranges (calibrated on 10 000 training images) against per-row ranges:
 * accuracy, agreement and rows per second, printed. Minutes of training, so it stays out of CI.
 */
import { existsSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { topClassAgreement } from '../../src/check/index.js';
import { Int8Runner, SimdRunner, useEngine } from '../../src/engine/index.js';
import { readIdx } from '../../src/io/index.js';
import { buildFromSpec } from '../../src/spec/spec.js';
import { tune } from '../../src/train/tune.js';
import { recordActivationRanges, withActivationRanges } from '../../src/transform/calibrate.js';
import { shrinkModel } from '../../src/transform/shrink.js';

const DIR = process.env.FASHION_MNIST_DIR ?? '/usr/share/datasets/fashion-mnist';
const wanted = process.env.TENDON_FASHION === '1' && existsSync(`${DIR}/train-images-idx3-ubyte.gz`);

function accuracy(y: Float32Array, labels: ArrayLike<number>, classes: number): number {
  let right = 0;
  for (let r = 0; r < labels.length; r++) {
    let best = 0;
    for (let c = 1; c < classes; c++) if (y[r * classes + c] > y[r * classes + best]) best = c;
    if (best === labels[r]) right++;
  }
  return right / labels.length;
}

describe.skipIf(!wanted)('Fashion-MNIST on the int8 engine (opt-in: TENDON_FASHION=1)', () => {
  it('int8 loses <= 0.3 points of test accuracy and agrees on >= 99.5% of top classes with its float32 parent', async () => {
    await useEngine('auto');
    const [xi, yi, xt, yt] = await Promise.all(
      ['train-images-idx3-ubyte.gz', 'train-labels-idx1-ubyte.gz', 't10k-images-idx3-ubyte.gz', 't10k-labels-idx1-ubyte.gz'].map((f) => readIdx(`${DIR}/${f}`)),
    );
    const spec = {
      inputs: 784,
      normalise: { method: 'minmax' as const },
      layers: [
        { kind: 'dense', size: 256, activation: 'relu' },
        { kind: 'dense', size: 128, activation: 'relu' },
        { kind: 'dense', size: 10, activation: 'softmax' },
      ],
    };
    const doc = await buildFromSpec(spec, 'fashion.json', { seed: 1, loadTensorFile: () => Promise.reject(new Error('none')) });
    const trained = await tune(
      doc,
      { x: Float32Array.from(xi.data), rows: xi.dims[0], y: Int32Array.from(yi.data) },
      { epochs: 3, batch: 64, lr: 0.001, seed: 1 },
    );
    const x = Float32Array.from(xt.data);
    const rows = xt.dims[0];
    const labels = Int32Array.from(yt.data);
    const parent = new SimdRunner(trained.doc).run(x, rows);
    const int8 = new Int8Runner(shrinkModel(trained.doc, 'i8'), { threads: 2 });
    await int8.ready();
    const y = int8.run(x, rows);
    int8.dispose();
    const a32 = accuracy(parent, labels, 10);
    const a8 = accuracy(y, labels, 10);
    const agree = topClassAgreement(y, parent, rows, 10);
    console.log(
      `Fashion-MNIST test: float32 ${(100 * a32).toFixed(2)}%, int8 (${int8.kernel}) ${(100 * a8).toFixed(2)}%, top class agrees on ${(100 * agree).toFixed(2)}%`,
    );
    expect(a32).toBeGreaterThanOrEqual(0.85);
    expect(a32 - a8).toBeLessThanOrEqual(0.003);
    expect(agree).toBeGreaterThanOrEqual(0.995);

    // Stored activation ranges (shrink --calibrate) against per-row ranges: the same i8 model,
    // calibrated on the first 10 000 training images, on the 10 000 test images.
    const shrunk = shrinkModel(trained.doc, 'i8');
    const calRows = 10_000;
    const calibrated = withActivationRanges(shrunk, recordActivationRanges(shrunk, Float32Array.from(xi.data.subarray(0, calRows * 784)), calRows)!);
    const measured: Record<string, { accuracy: number; agree: number; rowsPerSecond: number }> = {};
    for (const [name, doc] of [
      ['per row', shrunk],
      ['stored ranges', calibrated],
    ] as const) {
      const runner = new Int8Runner(doc, { threads: 1 });
      const out = runner.run(x, rows);
      // Speed: best of 5 passes over the test images at the engine's default chunk (256 rows).
      let best = Infinity;
      for (let pass = 0; pass < 5; pass++) {
        const t0 = performance.now();
        runner.run(x, rows);
        best = Math.min(best, performance.now() - t0);
      }
      runner.dispose();
      measured[name] = { accuracy: accuracy(out, labels, 10), agree: topClassAgreement(out, parent, rows, 10), rowsPerSecond: rows / (best / 1000) };
    }
    console.log(`Fashion-MNIST int8, one thread, float32 parent ${(100 * a32).toFixed(2)}%: ${JSON.stringify(measured)}`);
    expect(a32 - measured['stored ranges'].accuracy).toBeLessThanOrEqual(0.01);
    expect(measured['stored ranges'].agree).toBeGreaterThanOrEqual(0.98);
  }, 1_800_000);
});
