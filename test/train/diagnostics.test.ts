import { describe, it, expect } from 'vitest';
import type { DenseLayer, DropoutLayer, Layer } from '../../src/model/types.js';
import { ReluActivity, linearStacks, rawInputs, vanishingGradient } from '../../src/train/diagnostics.js';
import { normals, seededRng } from './seeded.js';

const dense = (activation: DenseLayer['activation']): DenseLayer => ({
  kind: 'dense',
  size: 1,
  activation,
  alpha: 0,
  weight: new Float32Array(1),
  bias: new Float32Array(1),
});
const dropout: DropoutLayer = { kind: 'dropout', rate: 0.5 };

describe('diagnostics (src/train/diagnostics.ts)', () => {
  it('vanishing gradients: warns past a factor of 1000 between the lowest and top dense layer (0.1 per layer over 5 layers ~ 1e-5; common practice)', () => {
    const norms = [0, 1, 2, 3, 4, 5].map((l) => ({ layer: l, kind: 'dense' as const, norm: Math.pow(0.1, 5 - l) }));
    const d = vanishingGradient(norms, 2);
    expect(d?.code).toBe('vanishing_gradient');
    expect(d?.layer).toBe(0);
    expect(d?.hint).toMatch(/ReLU/);
    const healthy = norms.map((n) => ({ ...n, norm: 1 / (1 + n.layer) }));
    expect(vanishingGradient(healthy)).toBeNull();
  });

  it('dying ReLU: warns when more than half of a layer never fired', () => {
    const a = new ReluActivity();
    a.observe(0, Float64Array.of(0, 0, 0, 1, 0, 0, 0, 0), 2, 4); // unit 3 fired only
    a.observe(2, Float64Array.of(1, 0, 0, 1), 2, 2); // both fired
    const w = a.warnings(1);
    expect(w).toHaveLength(1);
    expect(w[0]).toMatchObject({ code: 'dead_relu', layer: 0, epoch: 1 });
    expect(w[0].message).toContain('3 of 4');
  });

  it('linear dense layers feeding each other collapse into one (W = W_H W_O; common practice)', () => {
    const layers: Layer[] = [dense('linear'), dropout, dense('linear'), dense('relu'), dense('softmax')];
    const d = linearStacks(layers);
    expect(d.map((x) => x.layer)).toEqual([0, 2]);
    expect(linearStacks([dense('relu'), dense('linear')])).toEqual([]);
  });

  it('raw inputs far from standardised are reported only without normalisation', () => {
    const rng = seededRng(9);
    const rows = 200;
    const x = new Float64Array(rows * 2);
    const a = normals(rng, rows, 0, 1);
    const b = normals(rng, rows, 1000, 300); // e.g. a sensor in raw units
    for (let r = 0; r < rows; r++) {
      x[r * 2] = a[r];
      x[r * 2 + 1] = b[r];
    }
    const d = rawInputs(x, rows, 2, false);
    expect(d?.code).toBe('raw_inputs');
    expect(d?.message).toContain('feature 1');
    expect(d?.message).not.toContain('feature 0');
    expect(rawInputs(x, rows, 2, true)).toBeNull();
    expect(rawInputs(a, rows, 1, false)).toBeNull();
  });
});
