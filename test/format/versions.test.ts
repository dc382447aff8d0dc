/**
 * Format versions (FORMAT.md section 6): a field a reader may skip and still answer correctly
 * raises the minor version; one it must not skip (target scaling, field 10) makes the file
 * major 2, so a 1.x reader refuses it instead of answering in scaled units. Files without it
 * keep their 1.x bytes exactly. The int8 activation ranges (field 11) are minor: 1.2.
 */
import { describe, expect, it } from 'vitest';
import { ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel, toPayload } from '../../src/format/codec.js';
import { encodePayload } from '../../src/format/payload.js';
import { frame, HEADER_BYTES } from '../../src/format/header.js';
import { SeededRng, validateModel, type ModelDoc } from '../../src/model/index.js';
import { docOf, everyKindDoc, randomDense, tinyDoc } from '../fixtures/models.js';
import { thrown } from './helpers.js';

function scaledDoc(): ModelDoc {
  const rng = new SeededRng(4);
  return {
    ...docOf(3, [randomDense(rng, 3, 6, 'relu'), randomDense(rng, 6, 2, 'linear')]),
    targetScaling: { mean: Float64Array.of(100, -3), std: Float64Array.of(10, 0.5) },
  };
}

function withRanges(doc: ModelDoc, min: number[], max: number[]): ModelDoc {
  return { ...doc, activationRanges: { min: Float64Array.from(min), max: Float64Array.from(max), rows: 42 } };
}

const header = (bytes: Uint8Array) => ({ major: bytes[4] | (bytes[5] << 8), minor: bytes[6] | (bytes[7] << 8) });

describe('which version a file is written as', () => {
  it('a target-scaled model says major 2 in its header (bytes 4-5 = 02 00)', () => {
    const bytes = encodeModel(scaledDoc());
    expect(Array.from(bytes.subarray(4, 8))).toEqual([2, 0, 0, 0]);
    const back = decodeModel(bytes, 'scaled.tdn');
    expect(back.version).toEqual({ major: 2, minor: 0 });
    expect(Array.from(back.doc.targetScaling!.std)).toEqual([10, 0.5]);
  });

  // Pinned from main before this change (commit c18511e): the CRC-32 of each payload and the
  // header's version. A model without target scaling must keep exactly these bytes.
  it.each([
    ['every kind, f32', () => everyKindDoc({ storage: 'f32' }), '4ad38126', 0],
    ['every kind, i8', () => everyKindDoc({ storage: 'i8' }), 'fa7a5a9e', 0],
    ['tiny', () => tinyDoc(), '51e5a52e', 0],
    ['every kind with a temperature', () => ({ ...everyKindDoc(), temperature: 1.5 }), 'a4a9a9c5', 1],
  ])('a model without target scaling keeps its 1.x bytes: %s', (_, make, crc, minor) => {
    const bytes = encodeModel(make());
    expect(header(bytes)).toEqual({ major: 1, minor });
    expect(decodeModel(bytes, 'plain.tdn').checksum).toBe(crc);
  });

  it('int8 activation ranges are a minor addition (1.2); with target scaling as well the file is 2.0', () => {
    const rng = new SeededRng(2);
    const plain = docOf(3, [randomDense(rng, 3, 4, 'relu'), randomDense(rng, 4, 2, 'linear')]);
    const ranged = encodeModel(withRanges(plain, [-1, 0], [2, 5]));
    expect(header(ranged)).toEqual({ major: 1, minor: 2 });
    const back = decodeModel(ranged, 'ranged.tdn').doc.activationRanges!;
    expect([Array.from(back.min), Array.from(back.max), back.rows]).toEqual([[-1, 0], [2, 5], 42]);
    expect(header(encodeModel(withRanges(scaledDoc(), [-1, 0], [2, 5])))).toEqual({ major: 2, minor: 0 });
  });
});

describe('which versions are read', () => {
  const payload = (doc: ModelDoc) => encodeModel(doc).subarray(HEADER_BYTES);

  it('a 2.x file is read (any minor), and a 1.1 file carrying target scaling (as written before 2.0) still is', () => {
    expect(decodeModel(frame(payload(everyKindDoc()), { major: 2, minor: 7 }), 'two.tdn').version).toEqual({ major: 2, minor: 7 });
    const old = decodeModel(frame(payload(scaledDoc()), { major: 1, minor: 1 }), 'old-scaled.tdn');
    expect(Array.from(old.doc.targetScaling!.mean)).toEqual([100, -3]);
  });

  it('a 3.x file is refused with a typed error naming both versions; so is a major 0', () => {
    const error = thrown(() => decodeModel(frame(payload(tinyDoc()), { major: 3, minor: 0 }), 'three.tdn'));
    expect(error).toBeInstanceOf(ModelFileError);
    expect((error as ModelFileError).message).toBe("three.tdn: header: file format version 3.0 is newer than this reader's 2.0; open it with a newer tendon");
    const zero = thrown(() => decodeModel(frame(payload(tinyDoc()), { major: 0, minor: 9 }), 'zero.tdn'));
    expect((zero as ModelFileError).message).toContain('0.9 is older than any this reader (1.0 to 2.0) supports');
  });
});

describe('stored activation ranges are refused at open when unusable, naming the layer', () => {
  const rng = new SeededRng(3);
  const base = docOf(3, [randomDense(rng, 3, 4, 'relu'), { kind: 'dropout', rate: 0.1 }, randomDense(rng, 4, 2, 'linear')]);
  it.each([
    ['NaN', [0, Number.NaN], [1, 1], 'layers[2] (dense): range [NaN, 1] must be finite'],
    ['infinity', [Number.NEGATIVE_INFINITY, 0], [1, 1], 'layers[0] (dense): range [-Infinity, 1] must be finite'],
    ['min above max', [0, 3], [1, 1], 'layers[2] (dense): min 3 is above max 1'],
    ['wrong count', [0], [1], 'has 1 min and 1 max values, expected one per dense layer (2: layers[0], layers[2])'],
  ])('%s', (_, min, max, message) => {
    // A payload as a faulty writer would give it: the ranges set past the writer's own check.
    const problems: { where: string; message: string }[] = [];
    const raw = toPayload(base, problems);
    raw.activation_ranges = { min, max, rows: 10 };
    const opened = thrown(() => decodeModel(frame(encodePayload(raw), { major: 1, minor: 2 }), 'bad.tdn')) as ModelFileError;
    expect(opened).toBeInstanceOf(ModelFileError);
    expect(opened.message).toBe(`bad.tdn: activation_ranges: ${message}`);
    // The writer refuses them with the same words, and so does the check of a document in memory.
    const written = thrown(() => encodeModel(withRanges(base, min, max), 'bad.tdn')) as ModelFileError;
    expect(written.message).toBe(`bad.tdn: activation_ranges: ${message}`);
    expect(() => validateModel(withRanges(base, min, max), 'memory')).toThrow(message);
  });
});
