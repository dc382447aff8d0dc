import { describe, it, expect } from 'vitest';
import { gradientsOf, tune } from '../../src/train/tune.js';
import { mazurDoc } from '../fixtures/models.js';

// "A Step by Step Backpropagation Example" (Mazur 2015): values after one plain gradient step, lr 0.5,
// loss E = sum of 1/2 (t - o)^2, biases held fixed.
const EXPECTED = { w1: 0.149780716, w2: 0.19956143, w3: 0.24975114, w4: 0.29950229, w5: 0.35891648, w6: 0.408666186, w7: 0.51130127, w8: 0.561370121 };

describe('one SGD step on the 2-2-2 network (src/train/tune.ts; Mazur 2015 worked example)', () => {
  it('float64 reference gradients give all eight weights to 8 digits', () => {
    const doc = mazurDoc();
    const { loss, grads } = gradientsOf(doc, Float64Array.of(0.05, 0.1), Float64Array.of(0.01, 0.99), { rows: 1, loss: 'half_sse' });
    expect(loss).toBeCloseTo(0.298371109, 8);
    // Start from the exact decimal weights: the document's float32 copies are off by up to 1e-8.
    const start = [
      [0.15, 0.25, 0.2, 0.3],
      [0.4, 0.5, 0.45, 0.55],
    ];
    const step = (layer: number, k: number) => start[layer][k] - 0.5 * grads[layer][0][k];
    const got = { w1: step(0, 0), w3: step(0, 1), w2: step(0, 2), w4: step(0, 3), w5: step(1, 0), w7: step(1, 1), w6: step(1, 2), w8: step(1, 3) };
    for (const [name, value] of Object.entries(EXPECTED)) expect(got[name as keyof typeof got], name).toBeCloseTo(value, 8);
  });

  it.each([
    ['reference', 7],
    ['engine', 6],
    ['fast', 6],
  ] as const)('tune on the %s path stores all eight weights to float32 precision (%i digits)', async (path, digits) => {
    const start = mazurDoc();
    const {
      doc,
      history,
      path: used,
    } = await tune(
      start,
      { x: Float64Array.of(0.05, 0.1), rows: 1, y: Float64Array.of(0.01, 0.99) },
      { path, optimizer: 'sgd', lr: 0.5, epochs: 1, batch: 1, loss: 'half_sse', freezeTensors: ['layers[0].bias', 'layers[1].bias'] },
    );
    const [h, o] = doc.layers;
    if (h.kind !== 'dense' || o.kind !== 'dense') throw new Error('layer kinds changed');
    const got = { w1: h.weight[0], w3: h.weight[1], w2: h.weight[2], w4: h.weight[3], w5: o.weight[0], w7: o.weight[1], w6: o.weight[2], w8: o.weight[3] };
    for (const [name, value] of Object.entries(EXPECTED)) {
      // Weights are stored as float32 (spacing 1.5e-8 near 0.25), so 8 digits are out of reach here.
      expect(got[name as keyof typeof got], name).toBeCloseTo(value, digits);
    }
    expect([...h.bias, ...o.bias]).toEqual([...start.layers.flatMap((l) => (l.kind === 'dense' ? [...l.bias] : []))]);
    // Mazur 2015: E_total = 0.298371109 before the step (the batch loss of the only batch).
    expect(history[0].batchLoss).toBeCloseTo(0.298371109, path === 'reference' ? 8 : 6);
    expect(history[0].updates).toBe(1);
    expect(used).toBe(path);
  });
});
