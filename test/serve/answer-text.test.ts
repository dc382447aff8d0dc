/**
 * The score route's hot-path writers against their plain forms: the JSON answer written straight
 * from float32 outputs against JSON.stringify of the answer object (ECMA-404 / ECMA-262
 * Number::toString spell the numbers), and an NPY float32 body viewed in place against a copy.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { encodeNpy } from '../../src/io/index.js';
import { parseNpyBody } from '../../src/serve/http-npy.js';
import { scoreAnswer, scoreAnswerText, type Generation } from '../../src/serve/http-score.js';

const generations = new Map<number, Generation>([
  [1, { checksum: 'a1b2c3d4', labels: null }],
  [2, { checksum: null, labels: ['under', 'good', 'over'] }],
  [3, { checksum: 'e5f6a7b8', labels: ['only'] }],
]);

/** The batcher's output: rows of `width` outputs, each followed by the generation column. */
function withGeneration(values: number[], rows: number, generation: number): Float32Array {
  const width = values.length / rows;
  const y = new Float32Array(rows * (width + 1));
  for (let r = 0; r < rows; r++) {
    y.set(values.slice(r * width, (r + 1) * width), r * (width + 1));
    y[r * (width + 1) + width] = generation;
  }
  return y;
}

describe('scoreAnswerText', () => {
  it('is JSON.stringify of the answer object, character for character, for any float32 outputs, labels or none (property)', () => {
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 6 }),
        fc.constantFrom(1, 2, 3, 99),
        fc.array(fc.oneof(fc.float(), fc.constantFrom(-0, 0, NaN, Infinity, -Infinity, 1e-45, 3.4028234663852886e38)), { minLength: 1, maxLength: 5 }),
        (rows, generation, row) => {
          const width = generation === 2 ? 3 : generation === 3 ? 1 : row.length;
          const values = Array.from({ length: rows * width }, (_, i) => row[i % row.length]!);
          const y = withGeneration(values, rows, generation);
          expect(scoreAnswerText(y, rows, generations)).toBe(JSON.stringify(scoreAnswer(y, rows, generations).body) + '\n');
        },
      ),
    );
  });

  it('names the top output per row and its label (hand-worked example)', () => {
    const y = withGeneration([0.25, 0.5, 0.25, 0.7, 0.2, 0.1], 2, 2);
    expect(JSON.parse(scoreAnswerText(y, 2, generations))).toEqual({
      model: null,
      outputs: [
        [0.25, 0.5, 0.25],
        [Math.fround(0.7), Math.fround(0.2), Math.fround(0.1)],
      ],
      top: [1, 0],
      labels: ['under', 'good', 'over'],
      topLabel: ['good', 'under'],
    });
  });
});

describe('parseNpyBody in place', () => {
  const values = Float32Array.from({ length: 6 }, (_, i) => i / 8 - 0.3);
  const shape = { inputs: 3, features: null, maxRows: 10 };

  it('views a float32 body on a 4-byte boundary without copying it', () => {
    const body = encodeNpy(values, [2, 3]);
    const { rows, x } = parseNpyBody(body, shape);
    expect(rows).toBe(2);
    expect(x.buffer).toBe(body.buffer);
    expect(Array.from(x)).toEqual(Array.from(values));
  });

  it('copies a body that starts off a 4-byte boundary, to the same values', () => {
    const encoded = encodeNpy(values, [2, 3]);
    const shifted = new Uint8Array(encoded.length + 1).subarray(1);
    shifted.set(encoded);
    const { x } = parseNpyBody(shifted, shape);
    expect(x.buffer).not.toBe(shifted.buffer);
    expect(Array.from(x)).toEqual(Array.from(values));
  });
});
