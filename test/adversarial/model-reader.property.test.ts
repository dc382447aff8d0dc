/**
 * The model reader against hostile bytes, as fast-check properties with fixed seeds.
 *
 * Every property holds decodeModel to the same promise: it ends in ModelFileError, or — only
 * where the change is one the checksum cannot see — in a document that passes the model
 * validator; it never throws anything else, returns within a time bound, and never allocates
 * more than a small multiple of the file's size.
 *
 * The plain every-offset truncation and single-byte CRC checks live in test/format/codec.test.ts;
 * this file adds randomised damage on every storage codec, and crafted payloads built through
 * protobufjs with the embedded schema and a recomputed header CRC.
 */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel, toPayload } from '../../src/format/codec.js';
import { crc32 } from '../../src/format/crc32.js';
import { frame, HEADER_BYTES } from '../../src/format/header.js';
import { encodePayload, payloadSchema, type RawModel, type RawTensor } from '../../src/format/payload.js';
import { modelProblems } from '../../src/model/validate.js';
import type { ModelDoc, StorageCodec } from '../../src/model/types.js';
import { everyKindDoc, tinyDoc } from '../fixtures/models.js';
import { measure } from './meter.js';

/** Generous: a correct decode of these few-KiB files takes well under a millisecond or two. */
const TIME_BOUND_MS = 250;
/**
 * Allocation bound: a fixed allowance for protobufjs's objects and the decoded document, plus
 * 64 x the file size. A hostile shape that made the reader allocate what it declares would
 * need megabytes to gigabytes; the control test below shows the meter sees 32 MiB.
 */
const FIXED_ALLOWANCE = 4 * 1024 * 1024;
const allocationBound = (fileBytes: number) => FIXED_ALLOWANCE + 64 * fileBytes;

const STORAGES: StorageCodec[] = ['f32', 'f16', 'i8'];
const FILES: Record<StorageCodec, Uint8Array> = {
  f32: encodeModel(everyKindDoc({ storage: 'f32' })),
  f16: encodeModel(everyKindDoc({ storage: 'f16' })),
  i8: encodeModel(everyKindDoc({ storage: 'i8' })),
};

type Verdict = { kind: 'refused'; error: ModelFileError } | { kind: 'decoded'; doc: ModelDoc; minor: number };

/**
 * Decode under the meter and check the universal promise: typed error or a valid document,
 * within the time and allocation bounds. Returns which of the two it was.
 */
function decodeHostile(bytes: Uint8Array, label: string): Verdict {
  const { outcome, allocated, milliseconds } = measure(() => decodeModel(bytes, label));
  expect(milliseconds, `${label}: decode time`).toBeLessThan(TIME_BOUND_MS);
  expect(allocated, `${label}: bytes allocated for a ${bytes.length}-byte file`).toBeLessThan(allocationBound(bytes.length));
  if (!outcome.ok) {
    // Anything but ModelFileError (a RangeError from protobufjs, a TypeError) fails here.
    expect(outcome.error, label).toBeInstanceOf(ModelFileError);
    const error = outcome.error as ModelFileError;
    expect(error.problems.length).toBeGreaterThan(0);
    expect(error.message.startsWith(`${label}: `)).toBe(true);
    expect(error.message).not.toContain('\n');
    return { kind: 'refused', error };
  }
  // A decoded document must be one the rest of tendon accepts.
  expect(modelProblems(outcome.value.doc), label).toEqual([]);
  return { kind: 'decoded', doc: outcome.value.doc, minor: outcome.value.version.minor };
}

/** The payload object of a document, for crafting files through protobufjs. */
function rawOf(doc: ModelDoc): RawModel {
  const problems: { where: string; message: string }[] = [];
  const raw = toPayload(doc, problems);
  expect(problems).toEqual([]);
  return raw;
}

/** Payload bytes -> a well-framed file: right length, right CRC-32. */
const reframe = (payload: Uint8Array): Uint8Array => frame(payload);

/** Every tensor slot of a payload (layer index, field name), in order. */
function tensorSlots(raw: RawModel): { layer: number; field: string; get: () => RawTensor | null; set: (t: RawTensor | null) => void }[] {
  const slots: ReturnType<typeof tensorSlots> = [];
  raw.layers.forEach((entry, layer) => {
    const params = (entry.dense ?? entry.batchnorm) as Record<string, unknown> | null | undefined;
    if (!params) return;
    const fields = entry.dense ? ['weight', 'bias'] : ['gamma', 'beta', 'running_mean', 'running_variance'];
    for (const field of fields) {
      slots.push({
        layer,
        field,
        get: () => params[field] as RawTensor | null,
        set: (t) => {
          params[field] = t;
        },
      });
    }
  });
  return slots;
}

const storageArb = fc.constantFrom(...STORAGES);

describe('the meter itself (control)', () => {
  it('sees a 32 MiB allocation that a hostile shape would cause, and the bound for a 4 KiB file is far below it', () => {
    const big = measure(() => new Float32Array(8 * 1024 * 1024).fill(1).length, { collectFirst: true });
    expect(big.outcome).toEqual({ ok: true, value: 8 * 1024 * 1024 });
    expect(big.allocated).toBeGreaterThanOrEqual(30 * 1024 * 1024);
    expect(allocationBound(4096)).toBeLessThan(32 * 1024 * 1024);
  });

  it('a valid file decodes within the bounds (calibration for the properties below)', () => {
    for (const storage of STORAGES) {
      const verdict = decodeHostile(FILES[storage], `good-${storage}.tdn`);
      expect(verdict.kind).toBe('decoded');
    }
  });
});

describe('random damage to a framed file', () => {
  it('byte flips anywhere: ModelFileError, except flips confined to the minor version (bytes 6-7, outside the CRC) which decode to the same model', () => {
    fc.assert(
      fc.property(
        storageArb,
        fc.uniqueArray(fc.nat({ max: FILES.f32.length - 1 }), { minLength: 1, maxLength: 8 }),
        fc.integer({ min: 1, max: 255 }),
        (storage, positions, mask) => {
          const file = FILES[storage].slice();
          const inRange = positions.filter((p) => p < file.length);
          fc.pre(inRange.length > 0);
          for (const p of inRange) file[p] ^= mask;
          const verdict = decodeHostile(file, 'flipped.tdn');
          if (verdict.kind === 'decoded') {
            // The header's minor version is not covered by the CRC (FORMAT.md section 1): any
            // 1.x is read, so this change is invisible by design. Nothing else may be.
            expect(inRange.every((p) => p === 6 || p === 7)).toBe(true);
            expect(verdict.doc).toEqual(decodeModel(FILES[storage], 'good.tdn').doc);
          }
        },
      ),
      { seed: 0x7e0d01, numRuns: 400 },
    );
    // Deliberately hit the minor version once, so the "invisible" branch is exercised.
    const minor = FILES.f32.slice();
    minor[6] ^= 0x07;
    const verdict = decodeHostile(minor, 'minor.tdn');
    expect(verdict.kind === 'decoded' && verdict.minor).toBe(7);
  });

  it('byte changes in the payload with the CRC recomputed (a writer with a bug, not a bad disk): ModelFileError or a valid model', () => {
    let refused = 0;
    let decoded = 0;
    fc.assert(
      fc.property(storageArb, fc.array(fc.tuple(fc.nat(), fc.integer({ min: 0, max: 255 })), { minLength: 1, maxLength: 6 }), (storage, edits) => {
        const payload = FILES[storage].slice(HEADER_BYTES);
        for (const [at, value] of edits) payload[at % payload.length] = value;
        const verdict = decodeHostile(reframe(payload), 'rewritten.tdn');
        if (verdict.kind === 'refused') refused++;
        else decoded++;
      }),
      { seed: 0x7e0d02, numRuns: 600 },
    );
    // Both outcomes occur: most damage is caught by the content checks, some lands in free
    // text (names, times) or in a weight byte that still makes a finite number.
    expect(refused).toBeGreaterThan(0);
    expect(decoded).toBeGreaterThan(0);
  });

  it('truncation at any offset with the header rewritten to match: ModelFileError or a valid shorter message (a cut between fields)', () => {
    fc.assert(
      fc.property(storageArb, fc.nat(), (storage, cut) => {
        const payload = FILES[storage].subarray(HEADER_BYTES);
        const n = cut % payload.length;
        const verdict = decodeHostile(reframe(payload.slice(0, n)), 'cut.tdn');
        if (verdict.kind === 'decoded') {
          // Protocol Buffers has no end marker: a clean cut between fields drops the trailing
          // ones (info, lineage, later layers). What remains is a prefix of the original:
          // whole layers, each equal to the layer it was.
          const original = decodeModel(FILES[storage], 'good.tdn').doc.layers;
          expect(verdict.doc.layers.length).toBeLessThanOrEqual(original.length);
          expect(verdict.doc.layers).toEqual(original.slice(0, verdict.doc.layers.length));
        }
      }),
      { seed: 0x7e0d03, numRuns: 400 },
    );
  });

  it('extended files: bytes appended after the payload are refused, naming how many', () => {
    fc.assert(
      fc.property(storageArb, fc.uint8Array({ minLength: 1, maxLength: 256 }), (storage, tail) => {
        const file = new Uint8Array(FILES[storage].length + tail.length);
        file.set(FILES[storage]);
        file.set(tail, FILES[storage].length);
        const verdict = decodeHostile(file, 'extended.tdn');
        expect(verdict.kind).toBe('refused');
        if (verdict.kind === 'refused') expect(verdict.error.message).toContain(`${tail.length} extra bytes`);
      }),
      { seed: 0x7e0d04, numRuns: 200 },
    );
  });

  it('extended payloads with the header rewritten: the tail is parsed as protobuf fields, ModelFileError or a valid model', () => {
    fc.assert(
      fc.property(storageArb, fc.uint8Array({ minLength: 1, maxLength: 256 }), (storage, tail) => {
        const payload = FILES[storage].subarray(HEADER_BYTES);
        const longer = new Uint8Array(payload.length + tail.length);
        longer.set(payload);
        longer.set(tail, payload.length);
        decodeHostile(reframe(longer), 'extended-framed.tdn');
      }),
      { seed: 0x7e0d05, numRuns: 400 },
    );
  });

  it('a header length that lies (any u32 but the truth) is refused before the payload is read', () => {
    fc.assert(
      fc.property(storageArb, fc.nat({ max: 0xffffffff }), (storage, declared) => {
        const file = FILES[storage].slice();
        const truth = file.length - HEADER_BYTES;
        fc.pre(declared !== truth);
        new DataView(file.buffer).setUint32(8, declared, true);
        const verdict = decodeHostile(file, 'liar.tdn');
        expect(verdict.kind).toBe('refused');
        if (verdict.kind === 'refused') expect(verdict.error.problems[0].where).toBe('header');
      }),
      { seed: 0x7e0d06, numRuns: 200 },
    );
  });
});

describe('crafted payloads with a correct CRC', () => {
  it('swapped tensors: refused naming a tensor unless the two have the same dtype and shape, then the swap decodes (the checksum cannot see it)', () => {
    const slotCount = tensorSlots(rawOf(everyKindDoc())).length;
    fc.assert(
      fc.property(storageArb, fc.nat({ max: slotCount - 1 }), fc.nat({ max: slotCount - 1 }), (storage, a, b) => {
        fc.pre(a !== b);
        const raw = rawOf(everyKindDoc({ storage }));
        const slots = tensorSlots(raw);
        const ta = slots[a].get()!;
        const tb = slots[b].get()!;
        slots[a].set(tb);
        slots[b].set(ta);
        const verdict = decodeHostile(reframe(encodePayload(raw)), 'swapped.tdn');
        const sameShape = ta.dtype === tb.dtype && ta.shape.join() === tb.shape.join();
        if (!sameShape) {
          expect(verdict.kind).toBe('refused');
          if (verdict.kind === 'refused') {
            const named = verdict.error.problems.map((p) => p.where);
            expect(named.some((w) => w.startsWith(`layers[${slots[a].layer}]`) || w.startsWith(`layers[${slots[b].layer}]`))).toBe(true);
          }
        } else if (verdict.kind === 'decoded') {
          // Same dtype and shape: a consistent file with two tensors exchanged. Only an outer
          // check (parity against a known answer, provenance) can tell; the values moved.
          expect(verdict.doc.layers.length).toBe(everyKindDoc().layers.length);
        }
      }),
      { seed: 0x7e0d07, numRuns: 300 },
    );
  });

  const dimsArb = fc.array(fc.nat({ max: 0xffffffff }), { minLength: 2, maxLength: 6 });

  it('shapes whose element count is huge or overflows 2^53 are refused at once, without allocating what they declare', () => {
    fc.assert(
      fc.property(dimsArb, fc.constantFrom(1, 2, 3), fc.nat({ max: 64 }), fc.nat({ max: 1 }), (dims, dtype, dataBytes, whichSlot) => {
        // Make the declared size surely exceed the bytes present (a zero dimension would not).
        const shape = dims.map((d) => Math.max(d, 2));
        fc.pre(shape.reduce((p, d) => p * d, 1) > 1e6);
        const raw = rawOf(tinyDoc());
        const dense = raw.layers[0].dense!;
        const tensor: RawTensor = { dtype, shape, data: new Uint8Array(dataBytes), scales: dtype === 3 ? [1] : [] };
        if (whichSlot === 0) dense.weight = tensor;
        else dense.bias = tensor;
        const verdict = decodeHostile(reframe(encodePayload(raw)), 'huge.tdn');
        expect(verdict.kind).toBe('refused');
        if (verdict.kind === 'refused') {
          const where = `layers[0].dense.${whichSlot === 0 ? 'weight' : 'bias'}`;
          expect(verdict.error.problems.find((p) => p.where === where)?.message).toMatch(/overflows|needs/);
        }
      }),
      { seed: 0x7e0d08, numRuns: 300 },
    );
  });

  it('dtype codes outside 1..3 (0, large, negative) are refused naming the tensor', () => {
    fc.assert(
      fc.property(fc.oneof(fc.constant(0), fc.integer({ min: 4, max: 0x7fffffff }), fc.integer({ min: -0x80000000, max: -1 })), (dtype) => {
        const raw = rawOf(tinyDoc());
        raw.layers[0].dense!.weight!.dtype = dtype;
        const verdict = decodeHostile(reframe(encodePayload(raw)), 'dtype.tdn');
        expect(verdict.kind).toBe('refused');
        if (verdict.kind === 'refused') {
          const problem = verdict.error.problems.find((p) => p.where === 'layers[0].dense.weight');
          expect(problem?.message).toMatch(dtype === 0 ? /dtype is not set/ : new RegExp(`unknown dtype code ${dtype}\\b`));
        }
      }),
      { seed: 0x7e0d09, numRuns: 100 },
    );
  });

  it('activation codes outside 1..7 are refused naming the layer', () => {
    fc.assert(
      fc.property(fc.oneof(fc.constant(0), fc.integer({ min: 8, max: 0x7fffffff }), fc.integer({ min: -0x80000000, max: -1 })), (code) => {
        const raw = rawOf(tinyDoc());
        raw.layers[0].dense!.activation = code;
        const verdict = decodeHostile(reframe(encodePayload(raw)), 'activation.tdn');
        expect(verdict.kind).toBe('refused');
        if (verdict.kind === 'refused') expect(verdict.error.problems.map((p) => p.where)).toContain('layers[0].dense.activation');
      }),
      { seed: 0x7e0d0a, numRuns: 100 },
    );
  });

  it('tensor data whose byte count lies about the shape (short, long, off by one element) is refused', () => {
    fc.assert(
      fc.property(storageArb, fc.integer({ min: -8, max: 64 }), (storage, delta) => {
        fc.pre(delta !== 0);
        const raw = rawOf(everyKindDoc({ storage }));
        const weight = raw.layers[0].dense!.weight!;
        const length = Math.max(0, weight.data.length + delta);
        fc.pre(length !== weight.data.length);
        const data = new Uint8Array(length);
        data.set(weight.data.subarray(0, Math.min(length, weight.data.length)));
        weight.data = data;
        const verdict = decodeHostile(reframe(encodePayload(raw)), 'data-length.tdn');
        expect(verdict.kind).toBe('refused');
        if (verdict.kind === 'refused') expect(verdict.error.problems.map((p) => p.where)).toContain('layers[0].dense.weight');
      }),
      { seed: 0x7e0d0b, numRuns: 150 },
    );
  });

  /** A protobuf varint (Protocol Buffers encoding guide: 7 bits per byte, low group first). */
  function varint(value: bigint): number[] {
    const out: number[] = [];
    let v = value;
    do {
      let byte = Number(v & 0x7fn);
      v >>= 7n;
      if (v > 0n) byte |= 0x80;
      out.push(byte);
    } while (v > 0n);
    return out;
  }

  it('length-delimited fields whose varint length runs past the end of the payload (up to 2^64 - 1) are refused as protobuf damage', () => {
    // Fields 6 (layers), 7 (info), 2 (feature_names): wire type 2, tag = field << 3 | 2.
    const tags = [0x32, 0x3a, 0x12];
    fc.assert(
      fc.property(
        storageArb,
        fc.constantFrom(...tags),
        fc.bigInt({ min: 1n, max: (1n << 64n) - 1n }),
        fc.uint8Array({ maxLength: 32 }),
        (storage, tag, claimed, body) => {
          fc.pre(claimed > BigInt(body.length));
          const payload = FILES[storage].subarray(HEADER_BYTES);
          const extra = [tag, ...varint(claimed), ...body];
          const bytes = new Uint8Array(payload.length + extra.length);
          bytes.set(payload);
          bytes.set(extra, payload.length);
          const verdict = decodeHostile(reframe(bytes), 'lying-length.tdn');
          expect(verdict.kind).toBe('refused');
          if (verdict.kind === 'refused') expect(verdict.error.problems[0].where).toBe('payload');
        },
      ),
      { seed: 0x7e0d0c, numRuns: 300 },
    );
  });

  it('a nested tensor whose data length runs past its enclosing message is refused', () => {
    // Re-encode the weight tensor by hand with a data length larger than what follows, inside a
    // LayerEntry whose own length is honest: the inner reader must stop at the message boundary.
    fc.assert(
      fc.property(fc.integer({ min: 1, max: 1 << 30 }), (extraClaim) => {
        const type = payloadSchema();
        const tensorType = type.lookupType('tendon.file.v1.Tensor');
        const honest = tensorType.encode({ dtype: 1, shape: [2, 1], data: new Uint8Array(8) }).finish();
        // honest ends with field 3 (tag 0x1a), length 8, 8 data bytes: raise the length.
        const dataTagAt = honest.length - 10;
        expect(honest[dataTagAt]).toBe(0x1a);
        const lying = Uint8Array.from([...honest.subarray(0, dataTagAt), 0x1a, ...varint(BigInt(8 + extraClaim)), ...new Uint8Array(8)]);
        const dense = [
          0x08,
          0x01,
          0x10,
          0x04,
          0x22,
          ...varint(BigInt(lying.length)),
          ...lying,
          0x2a,
          0x0b,
          0x08,
          0x01,
          0x12,
          0x01,
          0x01,
          0x1a,
          0x04,
          0,
          0,
          0x80,
          0x3e,
        ];
        const entry = [0x0a, ...varint(BigInt(dense.length)), ...dense];
        const payload = Uint8Array.from([0x08, 0x02, 0x32, ...varint(BigInt(entry.length)), ...entry]);
        const verdict = decodeHostile(reframe(payload), 'nested-lie.tdn');
        expect(verdict.kind).toBe('refused');
      }),
      { seed: 0x7e0d0d, numRuns: 100 },
    );
  });

  it('the hand-built nested payload is valid when its lengths tell the truth (so the test above fails only for the lie)', () => {
    const tensorType = payloadSchema().lookupType('tendon.file.v1.Tensor');
    const honest = tensorType.encode({ dtype: 1, shape: [2, 1], data: new Uint8Array(8) }).finish();
    const dense = [0x08, 0x01, 0x10, 0x04, 0x22, honest.length, ...honest, 0x2a, 0x0b, 0x08, 0x01, 0x12, 0x01, 0x01, 0x1a, 0x04, 0, 0, 0x80, 0x3e];
    const entry = [0x0a, dense.length, ...dense];
    const payload = Uint8Array.from([0x08, 0x02, 0x32, entry.length, ...entry]);
    const verdict = decodeHostile(reframe(payload), 'nested-truth.tdn');
    expect(verdict.kind).toBe('decoded');
    // FORMAT.md section 8 layout: bias 0x3E800000 = 0.25 (IEEE 754 binary32).
    if (verdict.kind === 'decoded' && verdict.doc.layers[0].kind === 'dense') expect(verdict.doc.layers[0].bias[0]).toBe(0.25);
  });

  it('a CRC recomputed over a payload of pure noise: ModelFileError, never a crash', () => {
    fc.assert(
      fc.property(fc.uint8Array({ minLength: 0, maxLength: 512 }), (noise) => {
        decodeHostile(reframe(noise), 'noise.tdn');
      }),
      { seed: 0x7e0d0e, numRuns: 500 },
    );
    // And the framing helper really writes the CRC the reader checks (ISO-HDLC CRC-32).
    const framed = reframe(Uint8Array.of(1, 2, 3));
    expect(new DataView(framed.buffer).getUint32(12, true)).toBe(crc32(Uint8Array.of(1, 2, 3)));
  });
});

describe('int8 activation ranges (field 11) with a correct CRC', () => {
  // everyKindDoc has 7 dense layers (layers 0, 3, 4, 5, 6, 7, 8).
  const DENSE = [0, 3, 4, 5, 6, 7, 8];
  const finiteArb = fc.double({ min: -1e6, max: 1e6, noNaN: true });
  const pairArb = fc.tuple(finiteArb, finiteArb).map(([a, b]) => (a <= b ? [a, b] : [b, a]));
  /** Valid ranges, then one kind of damage (or none): a bound made non-finite, a pair inverted, one pair too few or too many. */
  const rangesArb = fc
    .tuple(
      fc.array(pairArb, { minLength: DENSE.length, maxLength: DENSE.length }),
      fc.constantFrom('none', 'non-finite', 'inverted', 'fewer', 'more'),
      fc.nat({ max: DENSE.length - 1 }),
      fc.constantFrom(Number.NaN, Number.POSITIVE_INFINITY, Number.NEGATIVE_INFINITY),
      fc.boolean(),
      fc.nat(),
    )
    .map(([pairs, damage, at, bad, onMin, rows]) => {
      const min = pairs.map((p) => p[0]);
      const max = pairs.map((p) => p[1]);
      if (damage === 'non-finite') (onMin ? min : max)[at] = bad;
      if (damage === 'inverted') [min[at], max[at]] = [max[at] + 1, min[at]];
      if (damage === 'fewer') (onMin ? min : max).pop();
      if (damage === 'more') (onMin ? min : max).push(0);
      return { min, max, rows };
    });

  it('any ranges: refused naming the layer (or the count) unless one finite min <= max per dense layer, and then they decode as written', () => {
    let refused = 0;
    let decoded = 0;
    fc.assert(
      fc.property(storageArb, rangesArb, (storage, ranges) => {
        const raw = rawOf(everyKindDoc({ storage }));
        raw.activation_ranges = ranges;
        const verdict = decodeHostile(reframe(encodePayload(raw)), 'ranges.tdn');
        const countOk = ranges.min.length === DENSE.length && ranges.max.length === DENSE.length;
        const badAt = countOk ? ranges.min.findIndex((lo, i) => !(Number.isFinite(lo) && Number.isFinite(ranges.max[i]) && lo <= ranges.max[i])) : -1;
        if (!countOk || badAt >= 0) {
          expect(verdict.kind).toBe('refused');
          if (verdict.kind === 'refused') {
            const problem = verdict.error.problems.find((p) => p.where === 'activation_ranges');
            expect(problem?.message).toContain(countOk ? `layers[${DENSE[badAt]}] (dense)` : 'one per dense layer');
          }
          refused++;
        } else {
          expect(verdict.kind).toBe('decoded');
          if (verdict.kind === 'decoded') {
            expect(Array.from(verdict.doc.activationRanges!.min)).toEqual(ranges.min);
            expect(Array.from(verdict.doc.activationRanges!.max)).toEqual(ranges.max);
          }
          decoded++;
        }
      }),
      { seed: 0x7e0d0f, numRuns: 400 },
    );
    expect(refused).toBeGreaterThan(0);
    expect(decoded).toBeGreaterThan(0);
  });
});
