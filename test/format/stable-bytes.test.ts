/**
 * The bytes a document encodes to, and what the file check and the spec say of broken input,
 * pinned: each layer kind declares its stored fields once (src/model/layers/<kind>.ts) and the
 * codec, the file check and the spec loop over those declarations. These values were taken
 * from the codec as it stood before that change (commit c18511e, where each kind's fields were
 * spelt out by hand in codec.ts, check.ts and spec.ts); files written before must read and
 * write byte for byte the same, and the messages must stay the same.
 */
import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { ModelFileError, type Problem } from '../../src/errors.js';
import { decodeModel, encodeModel, toPayload } from '../../src/format/codec.js';
import { frame } from '../../src/format/header.js';
import { encodePayload, type RawModel } from '../../src/format/payload.js';
import { layerKindNames } from '../../src/model/index.js';
import type { ModelDoc } from '../../src/model/types.js';
import { buildFromSpec } from '../../src/spec/spec.js';
import { everyKindDoc } from '../fixtures/models.js';

// The kind names, as messages list them: from the catalogue, so a new kind changes no pinned message.
const KINDS = layerKindNames().join(', ');

const sha256 = (bytes: Uint8Array): string => createHash('sha256').update(bytes).digest('hex');

const noFiles = { loadTensorFile: () => Promise.reject(new Error('no files')), now: new Date('2025-06-01T00:00:00.000Z') };

/** A spec naming every kind, with fields given and fields left to their defaults (seeded draws included). */
const EVERY_KIND_SPEC = {
  inputs: 3,
  features: ['a', 'b', 'c'],
  labels: ['x', 'y'],
  normalise: { method: 'zscore', mean: [1, 2, 3], std: [0.5, 1, 2], count: 10 },
  name: 'spec-every-kind',
  layers: [
    { kind: 'dense', size: 4, activation: 'relu' },
    { kind: 'batchnorm', gamma: [1, 2, 3, 4], variance: [0.5, 1, 1.5, 2], momentum: 0.8 },
    { kind: 'batchnorm' },
    { kind: 'dropout', rate: 0.2 },
    { kind: 'dropout' },
    { kind: 'dense', size: 3, activation: 'leaky_relu', alpha: 0.2, bias: [0.1, 0.2, 0.3] },
    {
      kind: 'dense',
      size: 2,
      weight: [
        [1, 2],
        [3, 4],
        [5, 6],
      ],
    },
    {
      kind: 'dense',
      size: 2,
      activation: 'softmax',
      weight: [
        [1, -1],
        [0.5, 0.25],
      ],
      bias: [0, 1],
    },
  ],
};

/** The same spec with one problem in every kind (and a broken width that later layers are checked against). */
const BROKEN_SPEC = {
  inputs: 3,
  layers: [
    { kind: 'dense', size: 0, activation: 'nope', alpha: 'x', colour: 1 },
    { kind: 'dense', size: 2, weight: [[1, 2, 3]], bias: [1] },
    { kind: 'batchnorm', gamma: [1], variance: [1, -1], epsilon: 0, momentum: 2 },
    { kind: 'dropout', rate: 1, extra: true },
    { kind: 'conv' },
    'not an object',
  ],
};

function problemsOf(fn: () => unknown): readonly Problem[] {
  try {
    fn();
  } catch (error) {
    if (error instanceof ModelFileError) return error.problems;
    throw error;
  }
  return [];
}

function rawOf(doc: ModelDoc): RawModel {
  const problems: Problem[] = [];
  const raw = toPayload(doc, problems);
  expect(problems).toEqual([]);
  return raw;
}

// SHA-256 of the file bytes the encoder at commit c18511e (before the declarations) wrote for
// everyKindDoc, by storage and normalisation, and for a 1.1 file with a temperature. The files
// are kept in test/fixtures/format/every-kind-*.tdn, so the check holds whatever the builder becomes.
const BYTES_BEFORE: Record<string, string> = {
  'f32-zscore': 'cb7fe1874f9e2b4f654c03acfcc64d038445727af2a099f8ec92c9df03fdb53d',
  'f32-minmax': 'd7aaf50e183a74ada42abafaa673a111afed57e48871055dfeae1280f45a9b0e',
  'f32-none': '727f021214507b37b7b0074d7688ce48404df8b3c5199cc5c2186d0c076713f0',
  'f16-zscore': 'b6af94a1427ee4ab8c412392664c8e9807befd9f07cc55010d9dea7633dc7688',
  'f16-minmax': '102e2b2a6fb4d43f724e3dbe9e40230819a98fe1d7b1ecff767c8bffbba45889',
  'f16-none': '19ea42a7d149a12665988b671c16c1d580d3369ec40d608195b0e24a6c9fff00',
  'i8-zscore': 'f48ba02bae6ef177c03af5f50f53e508564c6f711448bbe15f6860d739be500c',
  'i8-minmax': '3b77b1575dd1ee6bd93998b31a7bb6174f062179d0af88e57b783030acf9b311',
  'i8-none': 'bb0983ee41e4f049776e4b8cf5a43b46c6f0d8808139a465cc39294bce7aae7d',
  temperature: '6ddb4b5df015ca766bacaa90d5f5bf3df7c3e606cd6b57f758cb064a57223281',
};

const fixture = (name: string): Uint8Array =>
  new Uint8Array(readFileSync(fileURLToPath(new URL(`../fixtures/format/every-kind-${name}.tdn`, import.meta.url))));

describe('files written before the kinds declared their fields read and write byte for byte the same', () => {
  for (const name of Object.keys(BYTES_BEFORE)) {
    it(`every-kind-${name}.tdn: the file as written then; it reads, and writes back to the very same bytes`, () => {
      const bytes = fixture(name);
      expect(sha256(bytes)).toBe(BYTES_BEFORE[name]);
      const { doc } = decodeModel(bytes, `every-kind-${name}.tdn`);
      expect(doc.layers.map((l) => l.kind)).toEqual(['dense', 'batchnorm', 'dropout', 'dense', 'dense', 'dense', 'dense', 'dense', 'dense']);
      expect(encodeModel(doc)).toEqual(bytes);
    });
  }

  it('a spec naming every kind, with defaults and seeded starting weights, packs to the same bytes', async () => {
    const doc = await buildFromSpec(EVERY_KIND_SPEC, 'spec.json', noFiles);
    expect(sha256(encodeModel(doc))).toBe('3577e53187ccbb39a9769120c3760587052d34c050cb797a796dd0b6636f7912');
    // The defaults as the spec states them: batchnorm 1, 0, 0, 1 with epsilon 1e-5, momentum 0.9; dropout 0.5; dense bias 0, alpha 0.01.
    expect(doc.layers[2]).toMatchObject({ epsilon: 1e-5, momentum: 0.9, gamma: Float32Array.of(1, 1, 1, 1), runningVariance: Float32Array.of(1, 1, 1, 1) });
    expect(doc.layers[4]).toEqual({ kind: 'dropout', rate: 0.5 });
    expect(doc.layers[6]).toMatchObject({ alpha: 0.01, activation: 'linear', bias: Float32Array.of(0, 0) });
  });
});

describe('what the file check and the spec say of broken input (the same as before but for four rewordings)', () => {
  // Reworded so one rule reads the same wherever it is checked: the file's "size must be at least
  // 1" and "alpha must be finite", the spec's "a number in [0, 1)" and "must be a number" (alpha),
  // and batchnorm's "vectors have unequal lengths".
  it('the spec: every problem of every kind, in order, each naming its field', async () => {
    const problems = await buildFromSpec(BROKEN_SPEC, 'spec.json', noFiles).then(
      () => [],
      (e: ModelFileError) => e.problems,
    );
    expect(problems).toEqual([
      { where: 'layers[0].colour', message: 'is not a field of a dense layer (fields: kind, size, activation, weight, bias, alpha)' },
      { where: 'layers[0].size', message: 'must be a whole number > 0, got 0' },
      { where: 'layers[0].activation', message: 'must be one of linear, relu, leaky_relu, sigmoid, tanh, softplus, softmax, got "nope"' },
      { where: 'layers[0].alpha', message: 'must be a finite number, got "x"' },
      { where: 'layers[2].epsilon', message: 'must be a finite number > 0, got 0' },
      { where: 'layers[2].momentum', message: 'must be in [0, 1], got 2' },
      { where: 'layers[2].gamma', message: 'has 1 values, expected 2' },
      { where: 'layers[2].variance[1]', message: 'must be >= 0, got -1' },
      { where: 'layers[3].extra', message: 'is not a field of a dropout layer (fields: kind, rate)' },
      { where: 'layers[3].rate', message: 'must be in [0, 1), got 1' },
      { where: 'layers[4].kind', message: `must be one of ${KINDS}, got "conv"` },
      { where: 'layers[5]', message: 'must be an object with a "kind"' },
    ]);
  });

  it('the file check: every problem of every kind, in order, each naming its payload field', () => {
    const raw = rawOf(everyKindDoc());
    raw.layers[0].dense!.size = 0;
    raw.layers[0].dense!.activation = 0;
    raw.layers[0].dense!.alpha = NaN;
    raw.layers[1].batchnorm!.running_variance = null;
    raw.layers[1].batchnorm!.momentum = 1.5;
    raw.layers[2].dropout!.rate = -1;
    raw.layers[3].dense!.weight!.shape = [5, 4];
    raw.layers.push({});
    expect(problemsOf(() => decodeModel(frame(encodePayload(raw)), 'x'))).toEqual([
      { where: 'layers[0].dense.size', message: 'size must be a whole number > 0, got 0' },
      { where: 'layers[0].dense.activation', message: 'activation is not set' },
      { where: 'layers[0].dense.alpha', message: 'alpha must be a finite number, got NaN' },
      { where: 'layers[1].batchnorm.running_variance', message: 'tensor is missing' },
      { where: 'layers[1].batchnorm.momentum', message: 'momentum must be in [0, 1], got 1.5' },
      { where: 'layers[2].dropout.rate', message: 'rate must be in [0, 1), got -1' },
      { where: 'layers[3].dense.weight', message: 'shape [5, 4] has 4 columns, but size is 5' },
      { where: 'layers[3].dense.weight', message: 'shape [5, 4] takes 5 inputs, but layers[1] (batchnorm) gives width 4' },
      { where: 'layers[9]', message: `no layer kind is set (expected ${KINDS})` },
    ]);
  });

  it('the file check: tensors of one layer that disagree on the incoming width, a missing tensor, a short one', () => {
    const raw = rawOf(everyKindDoc());
    const gamma = raw.layers[1].batchnorm!.gamma!;
    gamma.shape = [2];
    gamma.data = gamma.data.subarray(0, 8);
    raw.layers[3].dense!.bias = null;
    raw.layers[4].dense!.weight!.shape = [20];
    expect(problemsOf(() => decodeModel(frame(encodePayload(raw)), 'x'))).toEqual([
      { where: 'layers[1].batchnorm', message: 'tensors have unequal lengths along the input width: gamma 2, beta 4, running_mean 4, running_variance 4' },
      { where: 'layers[3].dense.bias', message: 'tensor is missing' },
      { where: 'layers[4].dense.weight', message: 'shape [20] needs 80 bytes of f32 data, but the tensor holds 60' },
    ]);
  });
});
