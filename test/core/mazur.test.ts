import { afterAll, describe, expect, it } from 'vitest';
import { TfjsRunner } from '../../src/engine/index.js';
import { mat64 } from '../../src/model/index.js';
import { referenceForward } from '../../src/reference/index.js';
import { FLOAT32_TOLERANCE } from '../../src/check/index.js';
import { denseOf, docOf } from '../fixtures/models.js';

// Mazur 2015, "A Step by Step Backpropagation Example": 2-2-2 logistic network.
// W[i][j] is input i -> unit j, row-major [inputs, units]:
//   hidden: w1 (i1->h1) = W[0][0], w3 (i1->h2) = W[0][1], w2 (i2->h1) = W[1][0], w4 (i2->h2) = W[1][1]
//   output: w5 (h1->o1) = W[0][0], w7 (h1->o2) = W[0][1], w6 (h2->o1) = W[1][0], w8 (h2->o2) = W[1][1]
const doc = docOf(2, [denseOf([0.15, 0.25, 0.2, 0.3], [0.35, 0.35], 'sigmoid'), denseOf([0.4, 0.5, 0.45, 0.55], [0.6, 0.6], 'sigmoid')]);
const input = [0.05, 0.1];
const targets = [0.01, 0.99];
const expected = { hidden: [0.593269992, 0.596884378], out: [0.75136507, 0.772928465], eTotal: 0.298371109 };

function eTotal(out: ArrayLike<number>): number {
  return 0.5 * (targets[0] - out[0]) ** 2 + 0.5 * (targets[1] - out[1]) ** 2;
}

describe('Mazur 2015 worked example, forward pass', () => {
  const session = new TfjsRunner(doc);
  afterAll(() => session.dispose());

  it('reference matches out_h1, out_h2, out_o1, out_o2 and E_total to 8 digits (Mazur 2015)', () => {
    const { y, layers } = referenceForward(doc, mat64(1, 2, Float64Array.from(input)), { keepLayers: true });
    const hidden = layers![0].data;
    // Within one unit of the 8th decimal: the published values carry 9 digits, and the model
    // stores its weights as float32 (0.15 becomes 0.150000006), which moves outputs by ~5e-9.
    const eightDigits = 1e-8;
    expect(Math.abs(hidden[0] - expected.hidden[0])).toBeLessThan(eightDigits);
    expect(Math.abs(hidden[1] - expected.hidden[1])).toBeLessThan(eightDigits);
    expect(Math.abs(y.data[0] - expected.out[0])).toBeLessThan(eightDigits);
    expect(Math.abs(y.data[1] - expected.out[1])).toBeLessThan(eightDigits);
    expect(Math.abs(eTotal(y.data) - expected.eTotal)).toBeLessThan(eightDigits);
  });

  it('engine matches the same values within float32 tolerance (Mazur 2015)', () => {
    const [hidden, out] = session.runLayers(Float32Array.from(input), 1);
    for (let j = 0; j < 2; j++) {
      expect(Math.abs(hidden[j] - expected.hidden[j])).toBeLessThan(FLOAT32_TOLERANCE.abs);
      expect(Math.abs(out[j] - expected.out[j])).toBeLessThan(FLOAT32_TOLERANCE.abs);
    }
    expect(Math.abs(eTotal(session.run(Float32Array.from(input), 1)) - expected.eTotal)).toBeLessThan(FLOAT32_TOLERANCE.abs);
  });
});
