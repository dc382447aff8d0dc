/**
 * The calibration temperature in the file (format 1.1) and where it is applied: folded into the
 * output layer when a document is opened for running, never changing a top class (Guo, Pleiss,
 * Sun and Weinberger 2017: dividing logits by one T > 0 keeps their order).
 */
import { describe, expect, it } from 'vitest';
import { everyKindDoc, randomFloat32, seededRandom, tinyDoc } from '../fixtures/models.js';
import { ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel } from '../../src/format/index.js';
import { modelProblems, withTemperatureFolded, type DenseLayer } from '../../src/model/index.js';
import { referenceForward, referenceLogits, toMat64 } from '../../src/reference/index.js';
import { modelFromDocument } from '../../src/tendon.js';
import { thrown } from './helpers.js';

/**
 * A 1.0 file written by the code before the temperature existed: the worked example's bytes,
 * copied from FORMAT.md section 8 (65 bytes, checksum 5bf7abeb).
 */
const OLD_FILE = Uint8Array.from(
  (
    '54 4e 44 4e 01 00 00 00 31 00 00 00 eb ab f7 5b 08 02 32 25 0a 23 08 01 10 04 22 10 08 01 12 02 ' +
    '02 01 1a 08 00 00 00 3f 00 00 80 bf 2a 0b 08 01 12 01 01 1a 04 00 00 80 3e 3a 06 0a 04 74 69 6e 79'
  )
    .split(' ')
    .map((h) => parseInt(h, 16)),
);

describe('temperature in the model file', () => {
  it('round-trips and is written as format 1.1; a model without one is still written as 1.0', () => {
    const doc = { ...everyKindDoc(), temperature: 1.75 };
    const { doc: again, version } = decodeModel(encodeModel(doc), 'mem');
    expect(again.temperature).toBe(1.75);
    expect(version).toEqual({ major: 1, minor: 1 });
    const plain = decodeModel(encodeModel(everyKindDoc()), 'mem');
    expect(plain.doc.temperature).toBeUndefined();
    expect(plain.version).toEqual({ major: 1, minor: 0 });
  });

  it('a 1.0 file written before the field existed (FORMAT.md worked example) still reads, with no temperature', () => {
    const { doc, version } = decodeModel(OLD_FILE, 'FORMAT.md');
    expect(version).toEqual({ major: 1, minor: 0 });
    expect(doc.temperature).toBeUndefined();
  });

  it('refuses a temperature that is not > 0 when writing, and one on a linear output when validating', () => {
    const bad = thrown(() => encodeModel({ ...tinyDoc(), temperature: -2 }));
    expect(bad).toBeInstanceOf(ModelFileError);
    expect(String((bad as Error).message)).toMatch(/temperature.*> 0/);
    const linear = tinyDoc();
    (linear.layers[0] as DenseLayer).activation = 'linear';
    expect(modelProblems({ ...linear, temperature: 2 }).map((p) => p.where)).toEqual(['temperature']);
    // Left on the document, so the session's validation refuses it rather than scaling a regression output.
    expect(withTemperatureFolded({ ...linear, temperature: 2 }).temperature).toBe(2);
  });
});

describe('temperature applied at open', () => {
  const rows = 64;
  const random = seededRandom(3);
  const x = randomFloat32(random, rows * 3, 4);

  it('reference output is softmax(z / T) of the raw logits, and no top class changes', () => {
    const base = everyKindDoc();
    const t = 2.5;
    const z = referenceLogits(base, x, rows);
    const calibrated = referenceForward({ ...base, temperature: t }, toMat64(x, rows, 3)).y.data;
    const raw = referenceForward(base, toMat64(x, rows, 3)).y.data;
    for (let r = 0; r < rows; r++) {
      const a = z[r * 2] / t;
      const b = z[r * 2 + 1] / t;
      const p1 = Math.exp(b) / (Math.exp(a) + Math.exp(b));
      expect(calibrated[r * 2 + 1]).toBeCloseTo(p1, 6);
      expect(calibrated[r * 2 + 1] > calibrated[r * 2]).toBe(raw[r * 2 + 1] > raw[r * 2]);
      // A temperature above 1 pulls the top probability towards 1/2.
      expect(Math.abs(calibrated[r * 2] - 0.5)).toBeLessThanOrEqual(Math.abs(raw[r * 2] - 0.5) + 1e-12);
    }
  });

  it('every engine runs the folded document: parity with the reference holds and the top classes match', async () => {
    const doc = { ...everyKindDoc(), temperature: 0.4 };
    for (const engine of ['fast', 'js'] as const) {
      const model = await modelFromDocument(doc, { engine });
      try {
        const report = model.check({ x, rows });
        expect(report.pass).toBe(true);
        const y = model.run(x, rows);
        const ref = referenceForward(everyKindDoc(), toMat64(x, rows, 3)).y.data;
        for (let r = 0; r < rows; r++) expect(y[r * 2 + 1] > y[r * 2]).toBe(ref[r * 2 + 1] > ref[r * 2]);
        expect(model.doc.temperature).toBe(0.4); // the stored fact is kept
      } finally {
        model.dispose();
      }
    }
  });
});
