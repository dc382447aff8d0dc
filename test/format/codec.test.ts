import { describe, expect, it } from 'vitest';
import { ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel, toPayload } from '../../src/format/codec.js';
import { crc32, crcHex } from '../../src/format/crc32.js';
import { frame, HEADER_BYTES } from '../../src/format/header.js';
import { DTYPE_CODES, encodePayload, type RawModel } from '../../src/format/payload.js';
import type { DenseLayer, ModelDoc } from '../../src/model/types.js';
import { thrown } from './helpers.js';
import { everyKindDoc, randomFloat32, seededRandom, tinyDoc } from '../fixtures/models.js';

function problemsOf(fn: () => unknown): { where: string; message: string }[] {
  const error = thrown(fn);
  expect(error).toBeInstanceOf(ModelFileError);
  return [...(error as ModelFileError).problems];
}

/** A file whose payload is built from `doc` and then edited, with a correct header and CRC. */
function crafted(doc: ModelDoc, edit: (raw: RawModel) => void): Uint8Array {
  const problems: { where: string; message: string }[] = [];
  const raw = toPayload(doc, problems);
  expect(problems).toEqual([]);
  edit(raw);
  return frame(encodePayload(raw));
}

function expectSameDocExceptLayers(a: ModelDoc, b: ModelDoc): void {
  expect(b.inputs).toBe(a.inputs);
  expect(b.features).toEqual(a.features);
  expect(b.labels).toEqual(a.labels);
  expect(b.normalise).toEqual(a.normalise);
  expect(b.meta).toEqual(a.meta);
  expect(b.provenance).toEqual(a.provenance);
  expect(b.storage).toBe(a.storage);
  expect(b.layers.map((l) => l.kind)).toEqual(a.layers.map((l) => l.kind));
}

describe('encode / decode round trip', () => {
  for (const normalise of ['zscore', 'minmax', 'unfitted-zscore', 'unfitted-minmax', 'none'] as const) {
    it(`f32 storage is exact, every layer kind and activation, normalisation ${normalise}`, () => {
      const doc = everyKindDoc({ normalise });
      const { doc: back, version, checksum } = decodeModel(encodeModel(doc), 'memory');
      expect(back).toEqual(doc);
      expect(version).toEqual({ major: 1, minor: 0 });
      expect(checksum).toMatch(/^[0-9a-f]{8}$/);
    });
  }

  it('f16 storage: dense weights within binary16 rounding (relative 2^-11, IEEE 754-2008), everything else exact', () => {
    const doc = everyKindDoc({ storage: 'f16' });
    const back = decodeModel(encodeModel(doc), 'memory').doc;
    expectSameDocExceptLayers(doc, back);
    let checked = 0;
    doc.layers.forEach((layer, i) => {
      const other = back.layers[i];
      if (layer.kind !== 'dense' || other.kind !== 'dense') {
        expect(other).toEqual(layer);
        return;
      }
      expect(other.bias).toEqual(layer.bias);
      expect({ ...other, weight: null, bias: null }).toEqual({ ...layer, weight: null, bias: null });
      for (let k = 0; k < layer.weight.length; k++) {
        const x = layer.weight[k];
        // Unit roundoff of binary16 is 2^-11; below 2^-14 the spacing is 2^-24, so half of it bounds the error.
        const bound = Math.max(Math.abs(x) * 2 ** -11, 2 ** -25);
        expect(Math.abs(other.weight[k] - x)).toBeLessThanOrEqual(bound);
        checked++;
      }
    });
    expect(checked).toBe(3 * 4 + 4 * 5 + 5 * 3 + 3 * 4 + 4 * 2 + 2 * 3 + 3 * 2);
  });

  it('i8 storage: dense weights within scale/2 of each column (common practice, symmetric quantisation)', () => {
    const doc = everyKindDoc({ storage: 'i8' });
    const back = decodeModel(encodeModel(doc), 'memory').doc;
    expectSameDocExceptLayers(doc, back);
    doc.layers.forEach((layer, i) => {
      const other = back.layers[i] as DenseLayer;
      if (layer.kind !== 'dense') return;
      expect(other.bias).toEqual(layer.bias);
      const cols = layer.size;
      const rows = layer.weight.length / cols;
      for (let c = 0; c < cols; c++) {
        let maxAbs = 0;
        for (let r = 0; r < rows; r++) maxAbs = Math.max(maxAbs, Math.abs(layer.weight[r * cols + c]));
        const bound = (maxAbs / 127) * (0.5 + 2 ** -16);
        for (let r = 0; r < rows; r++) {
          expect(Math.abs(other.weight[r * cols + c] - layer.weight[r * cols + c])).toBeLessThanOrEqual(bound);
        }
      }
    });
  });

  it('f16 and i8 files are smaller than f32 (2 and 1 bytes per weight instead of 4)', () => {
    const random = seededRandom(4);
    const wide = (storage: 'f32' | 'f16' | 'i8'): ModelDoc => ({
      ...tinyDoc(),
      inputs: 64,
      layers: [{ kind: 'dense', size: 64, activation: 'relu', alpha: 0, weight: randomFloat32(random, 64 * 64), bias: new Float32Array(64) }],
      storage,
    });
    const sizes = (['f32', 'f16', 'i8'] as const).map((storage) => encodeModel(wide(storage)).length);
    expect(sizes[1]).toBeLessThan(sizes[0]);
    expect(sizes[2]).toBeLessThan(sizes[1]);
  });

  it('the same document always encodes to the same bytes (stable checksum)', () => {
    const doc = everyKindDoc();
    const reordered = { ...doc, meta: { ...doc.meta, extra: Object.fromEntries(Object.entries(doc.meta.extra).reverse()) } };
    expect(encodeModel(reordered)).toEqual(encodeModel(doc));
  });

  it('the header carries magic TNDN, version 1.0, the payload length and its CRC-32', () => {
    const bytes = encodeModel(tinyDoc());
    const view = new DataView(bytes.buffer, bytes.byteOffset);
    expect(Array.from(bytes.subarray(0, 4))).toEqual([0x54, 0x4e, 0x44, 0x4e]);
    expect(view.getUint16(4, true)).toBe(1);
    expect(view.getUint16(6, true)).toBe(0);
    expect(view.getUint32(8, true)).toBe(bytes.length - HEADER_BYTES);
    expect(view.getUint32(12, true)).toBe(crc32(bytes.subarray(HEADER_BYTES)));
    expect(decodeModel(bytes, 'memory').checksum).toBe(crcHex(crc32(bytes.subarray(HEADER_BYTES))));
  });

  it('refuses to encode values that cannot be stored: NaN, and beyond float16 range under f16', () => {
    const doc = tinyDoc();
    const dense = doc.layers[0] as DenseLayer;
    dense.weight[1] = NaN;
    expect(problemsOf(() => encodeModel(doc)).map((p) => p.where)).toEqual(['layers[0].dense.weight']);
    dense.weight[1] = 70000;
    const problems = problemsOf(() => encodeModel({ ...doc, storage: 'f16' }));
    expect(problems[0].where).toBe('layers[0].dense.weight');
    expect(problems[0].message).toContain('70000');
  });
});

describe('versions (Protocol Buffers proto3: unknown fields are skipped)', () => {
  it('a newer minor version opens, with an unknown field appended to the payload', () => {
    const doc = everyKindDoc();
    const payload = encodeModel(doc).subarray(HEADER_BYTES);
    // Field 99, wire type 0 (varint): tag (99 << 3) | 0 = 792 = varint 0x98 0x06, value 1.
    const extended = Uint8Array.from([...payload, 0x98, 0x06, 0x01]);
    const file = frame(extended, { major: 1, minor: 3 });
    const { doc: back, version } = decodeModel(file, 'newer-minor.tdn');
    expect(version).toEqual({ major: 1, minor: 3 });
    expect(back).toEqual(doc);
  });

  it('a newer major version is refused, naming both versions', () => {
    const payload = encodeModel(tinyDoc()).subarray(HEADER_BYTES);
    const problems = problemsOf(() => decodeModel(frame(payload, { major: 3, minor: 1 }), 'future.tdn'));
    expect(problems).toHaveLength(1);
    expect(problems[0].where).toBe('header');
    expect(problems[0].message).toContain('3.1');
    expect(problems[0].message).toContain('2.0'); // this reader's version (2.0: target scaling must not be skipped)
    expect(problems[0].message).toContain('newer');
  });
});

describe('damaged files always end in ModelFileError', () => {
  const good = encodeModel(tinyDoc());

  it('truncation at every offset', () => {
    for (let n = 0; n < good.length; n++) {
      const error = thrown(() => decodeModel(good.subarray(0, n), 'cut.tdn'));
      expect(error, `cut at ${n}`).toBeInstanceOf(ModelFileError);
    }
  });

  it('truncation at every offset with the header rewritten to match: ModelFileError, or a valid prefix at a field boundary', () => {
    // Protocol Buffers has no end marker: a cut between top-level fields is a valid, shorter
    // message (e.g. without its info). Everything else must be refused with ModelFileError.
    const payload = good.subarray(HEADER_BYTES);
    let refused = 0;
    for (let n = 0; n < payload.length; n++) {
      try {
        decodeModel(frame(payload.subarray(0, n)), 'cut.tdn');
      } catch (error) {
        expect(error, `payload cut at ${n}`).toBeInstanceOf(ModelFileError);
        refused++;
      }
    }
    expect(refused).toBeGreaterThan(payload.length / 2);
  });

  it('a single flipped byte anywhere in the payload is caught by the CRC', () => {
    for (let i = HEADER_BYTES; i < good.length; i++) {
      const copy = good.slice();
      copy[i] ^= 0x5a;
      const problems = problemsOf(() => decodeModel(copy, 'flip.tdn'));
      expect(problems[0].message, `byte ${i}`).toContain('CRC-32 mismatch');
    }
  });

  it('seeded random payload corruption with a recomputed CRC either decodes or throws ModelFileError, never anything else', () => {
    const random = seededRandom(11);
    const payload = encodeModel(everyKindDoc()).subarray(HEADER_BYTES);
    for (let trial = 0; trial < 2000; trial++) {
      const copy = payload.slice();
      const flips = 1 + Math.floor(random() * 4);
      for (let f = 0; f < flips; f++) copy[Math.floor(random() * copy.length)] = Math.floor(random() * 256);
      try {
        decodeModel(frame(copy), 'fuzz.tdn');
      } catch (error) {
        expect(error).toBeInstanceOf(ModelFileError);
      }
    }
  });

  it('a header whose payload length lies (longer or shorter than the file) is refused', () => {
    for (const delta of [1, -1, 1000]) {
      const copy = good.slice();
      const view = new DataView(copy.buffer);
      view.setUint32(8, view.getUint32(8, true) + delta, true);
      const problems = problemsOf(() => decodeModel(copy, 'liar.tdn'));
      expect(problems[0].where).toBe('header');
      expect(problems[0].message).toMatch(delta > 0 ? /truncated/ : /extra bytes/);
    }
  });

  it('bad magic says it is not a tendon model file', () => {
    const copy = good.slice();
    copy[0] = 0x89;
    expect(problemsOf(() => decodeModel(copy, 'x.png'))[0].message).toContain('not a tendon model file');
  });

  it('a payload that is not protobuf at all (correct CRC) is a decode failure', () => {
    const problems = problemsOf(() => decodeModel(frame(Uint8Array.from([0x0a, 0xff, 0xff, 0xff])), 'junk.tdn'));
    expect(problems[0].where).toBe('payload');
  });
});

describe('hostile shapes are refused before any allocation', () => {
  it('shape [2^31, 2^31] with 8 bytes of data (correct CRC) throws ModelFileError at once', () => {
    const file = crafted(tinyDoc(), (raw) => {
      raw.layers[0].dense!.weight = { dtype: DTYPE_CODES.f32, shape: [2 ** 31, 2 ** 31], data: new Uint8Array(8), scales: [] };
    });
    const started = performance.now();
    const problems = problemsOf(() => decodeModel(file, 'huge.tdn'));
    expect(performance.now() - started).toBeLessThan(200);
    expect(problems.find((p) => p.where === 'layers[0].dense.weight')?.message).toMatch(/needs|overflows/);
  });

  it('shape [65536, 65536, 65536, 65536] (2^64 elements, past 2^53) is refused', () => {
    const file = crafted(tinyDoc(), (raw) => {
      raw.layers[0].dense!.weight = { dtype: DTYPE_CODES.i8, shape: [65536, 65536, 65536, 65536], data: new Uint8Array(0), scales: [] };
    });
    const problems = problemsOf(() => decodeModel(file, 'huge.tdn'));
    expect(problems.some((p) => p.where === 'layers[0].dense.weight')).toBe(true);
  });

  it('a byte count that does not match dtype size x shape product is refused', () => {
    const file = crafted(tinyDoc(), (raw) => {
      raw.layers[0].dense!.weight!.data = raw.layers[0].dense!.weight!.data.subarray(0, 6);
    });
    const problems = problemsOf(() => decodeModel(file, 'short.tdn'));
    expect(problems).toEqual([expect.objectContaining({ where: 'layers[0].dense.weight' })]);
  });
});

describe('content checks report every problem at once', () => {
  it('reports problems in several layers and fields together, each named', () => {
    const file = crafted(everyKindDoc(), (raw) => {
      raw.layers[0].dense!.activation = 42; // unknown activation
      raw.layers[1].batchnorm!.epsilon = 0; // epsilon <= 0
      raw.layers[2].dropout!.rate = 1; // outside [0, 1)
      raw.layers[3].dense!.bias!.shape = [4]; // 4 != size 5 (and 16 bytes fit [4])
      raw.layers[3].dense!.bias!.data = raw.layers[3].dense!.bias!.data.subarray(0, 16);
      raw.zscore!.std[1] = -1; // std <= 0
      raw.feature_names.pop(); // 2 names for 3 inputs
    });
    const problems = problemsOf(() => decodeModel(file, 'many.tdn'));
    expect(problems.length).toBeGreaterThanOrEqual(6);
    expect(problems.map((p) => p.where)).toEqual(
      expect.arrayContaining([
        'layers[0].dense.activation',
        'layers[1].batchnorm.epsilon',
        'layers[2].dropout.rate',
        'layers[3].dense.bias',
        'zscore.std',
        'feature_names',
      ]),
    );
  });

  it.each<[string, (raw: RawModel) => void, string, RegExp]>([
    ['unknown dtype code', (r) => void (r.layers[0].dense!.weight!.dtype = 9), 'layers[0].dense.weight', /unknown dtype code 9/],
    ['weight not 2-D', (r) => void (r.layers[0].dense!.weight!.shape = [12]), 'layers[0].dense.weight', /2-D/],
    ['weight columns != size', (r) => void (r.layers[0].dense!.weight!.shape = [6, 2]), 'layers[0].dense.weight', /size is 4/],
    [
      'weight rows != incoming width',
      (r) => {
        const w = r.layers[3].dense!.weight!;
        w.shape = [2, 5];
        w.data = w.data.subarray(0, 40);
      },
      'layers[3].dense.weight',
      /takes 2 inputs, but layers\[1\] \(batchnorm\) gives width 4/,
    ],
    [
      'non-finite weight',
      (r) => void new DataView(r.layers[0].dense!.weight!.data.buffer, r.layers[0].dense!.weight!.data.byteOffset).setFloat32(4, Infinity, true),
      'layers[0].dense.weight',
      /non-finite/,
    ],
    ['missing bias', (r) => void (r.layers[0].dense!.bias = null), 'layers[0].dense.bias', /missing/],
    [
      'negative running variance',
      (r) =>
        void new DataView(r.layers[1].batchnorm!.running_variance!.data.buffer, r.layers[1].batchnorm!.running_variance!.data.byteOffset).setFloat32(
          8,
          -0.5,
          true,
        ),
      'layers[1].batchnorm.running_variance',
      /negative/,
    ],
    [
      'batchnorm vectors of unequal length',
      (r) => {
        const gamma = r.layers[1].batchnorm!.gamma!;
        gamma.shape = [3];
        gamma.data = gamma.data.subarray(0, 12);
      },
      'layers[1].batchnorm',
      /unequal lengths/,
    ],
    ['no layer kind set', (r) => void (r.layers[2] = {}), 'layers[2]', /no layer kind/],
    ['normalisation of the wrong length', (r) => void r.zscore!.mean.push(1), 'zscore.mean', /expected 3/],
    ['labels count != outputs', (r) => void r.output_labels.push('maybe'), 'output_labels', /3 labels for 2 outputs/],
    ['bad provenance checksum', (r) => void (r.lineage[0].checksum = 'XYZ'), 'lineage[0].checksum', /hex/],
    [
      'i8 scales count != columns',
      (r) => {
        const w = r.layers[0].dense!.weight!;
        w.dtype = DTYPE_CODES.i8;
        w.data = w.data.subarray(0, 12);
        w.scales = [1, 1];
      },
      'layers[0].dense.weight',
      /2 scales, expected one per column \(4\)/,
    ],
    // A zero scale would silently zero its column's codes; negative, NaN and infinite ones are nonsense.
    ...(
      [
        ['zero', 0],
        ['negative', -0.5],
        ['NaN', Number.NaN],
        ['infinite', Infinity],
      ] as const
    ).map(
      ([what, bad]) =>
        [
          `i8 ${what} scale`,
          (r: RawModel) => {
            const w = r.layers[0].dense!.weight!;
            w.dtype = DTYPE_CODES.i8;
            w.data = w.data.subarray(0, 12);
            w.scales = [0.5, 0.25, bad, 1];
          },
          'layers[0].dense.weight.scales',
          /1 zero, negative or non-finite scale value \(first at element 2/,
        ] as [string, (r: RawModel) => void, string, RegExp],
    ),
  ])('%s', (_name, edit, where, message) => {
    const file = crafted(everyKindDoc(), edit);
    const problems = problemsOf(() => decodeModel(file, 'bad.tdn'));
    const hit = problems.find((p) => p.where === where);
    expect(hit, JSON.stringify(problems)).toBeDefined();
    expect(hit!.message).toMatch(message);
  });

  it('the error message names the path and each problem on one line', () => {
    const file = crafted(tinyDoc(), (r) => void (r.layers[0].dense!.activation = 42));
    const error = thrown(() => decodeModel(file, 'models/x.tdn')) as ModelFileError;
    expect(error.message).toMatch(/^models\/x\.tdn: layers\[0\]\.dense\.activation: unknown activation code 42/);
    expect(error.message).not.toContain('\n');
    expect(error.exitCode).toBe(2);
  });
});
