/**
 * The walk-through of DEVELOPERS.md ("Adding a layer kind") made true in test code: a layer kind
 * registered through the catalogue alone, with its message added to the schema text, runs in the
 * float64 reference and on the tfjs engines, is written and read by the codec, checked by the
 * file check, validated, read from a spec and described by `tendon about`; the fast kernel, fast
 * on threads and int8 refuse it when the model is opened, naming the engine, the layer and the
 * kind. Nothing outside this file is told of it.
 *
 * The toy is "clip": y = min(max(gain ⊙ x, -limit), limit) per feature, one small tensor (gain,
 * one value per incoming feature) and one number (limit > 0). Its backward is plain calculus:
 * where |gain·x| < limit, dy/dx = gain and dy/dgain = x; elsewhere both are 0.
 */
import * as tf from '@tensorflow/tfjs-core';
import { afterAll, describe, expect, it } from 'vitest';
import { parityReport } from '../../src/check/index.js';
import { SharedMemoryRunner, SimdRunner, openRunner, simdTrainBlocker, useEngine, wasmSimdAvailable } from '../../src/engine/index.js';
import { EngineRefusal, ModelFileError } from '../../src/errors.js';
import { decodeModel, encodeModel, toPayload } from '../../src/format/codec.js';
import { frame } from '../../src/format/header.js';
import { encodePayload, usePayloadSchema } from '../../src/format/payload.js';
import { TENDON_SCHEMA } from '../../src/format/schema.js';
import {
  isLayerKindName,
  layerKindNames,
  mat64,
  modelFacts,
  modelProblems,
  registerLayerKind,
  storedFieldProblems,
  type Layer,
  type LayerCatalogue,
  type LayerKind,
  type Mat64,
  type StoredForm,
} from '../../src/model/index.js';
import { referenceForward, toMat64 } from '../../src/reference/index.js';
import { buildFromSpec } from '../../src/spec/spec.js';
import { batchnorm } from '../../src/model/layers/batchnorm.js';
import { dense } from '../../src/model/layers/dense.js';
import { dropout } from '../../src/model/layers/dropout.js';
import { denseOf, docOf } from '../fixtures/models.js';

interface ClipLayer {
  readonly kind: 'clip';
  gain: Float32Array;
  limit: number;
}

// Step 2 of the walk-through: the kind's stored fields, declared once.
const STORED: StoredForm<ClipLayer> = {
  output: 'in',
  fields: [
    { type: 'tensor', key: 'gain', proto: 'gain', spec: 'gain', shape: ['in'], storage: 'f32', start: 1 },
    { type: 'number', key: 'limit', proto: 'limit', spec: 'limit', rule: { ok: (v) => Number.isFinite(v) && v > 0, rule: 'a finite number > 0' }, default: 1 },
  ],
};

const clamp = (v: number, limit: number): number => Math.min(Math.max(v, -limit), limit);

const clip: LayerKind<ClipLayer> = {
  kind: 'clip',
  stored: STORED,
  tensors: (layer, width, i) => [{ name: `layers[${i}].gain`, shape: [width], data: layer.gain }],
  trainable: (layer, width, i) => [{ name: `layers[${i}].gain`, shape: [width], data: layer.gain }],
  clone: (layer) => ({ ...layer, gain: layer.gain.slice() }),
  fillEmpty: (layer, width) => (layer.gain.length === 0 ? { ...layer, gain: new Float32Array(width).fill(1) } : null),
  describe: (layer) => `limit ${layer.limit}`,
  validate: (layer, width, where) => storedFieldProblems(STORED, layer, width, where),
  reference: {
    forward(layer, x) {
      const z = x.data.map((v, i) => layer.gain[i % x.cols] * v);
      return {
        y: mat64(
          x.rows,
          x.cols,
          z.map((v) => clamp(v, layer.limit)),
        ),
        saved: { x, z },
      };
    },
    backward(layer, saved, dy) {
      const { x, z } = saved as { x: Mat64; z: Float64Array };
      const dz = dy.data.map((d, i) => (Math.abs(z[i]) < layer.limit ? d : 0));
      const dgain = new Float64Array(x.cols);
      dz.forEach((d, i) => (dgain[i % x.cols] += d * x.data[i]));
      return {
        dx: mat64(
          x.rows,
          x.cols,
          dz.map((d, i) => d * layer.gain[i % x.cols]),
        ),
        grads: [dgain],
      };
    },
  },
  engine: {
    upload: (layer) => [tf.tensor1d(layer.gain.slice())],
    forward(layer, [gain], x) {
      const z = tf.mul(x, gain) as tf.Tensor2D;
      return { y: tf.clipByValue(z, -layer.limit, layer.limit), saved: [tf.clone(x), z] };
    },
    backward(layer, [gain], [x, z], dy) {
      const dz = tf.mul(dy, tf.cast(tf.less(tf.abs(z), layer.limit), 'float32'));
      return { dx: tf.mul(dz, gain) as tf.Tensor2D, grads: [tf.sum(tf.mul(dz, x), 0)] };
    },
  },
  simd: { inference: { refused: 'the kernel has no clip operation' }, training: { refused: 'the kernel has no clip operation' } },
};

// Step 3: the catalogue line (here the test hook). Step 4: its message in the schema.
const builtIn = layerKindNames();
const toy = registerLayerKind(clip);
const CLIP_SCHEMA = TENDON_SCHEMA.replace('    DropoutParams dropout = 3;\n', '    DropoutParams dropout = 3;\n    ClipParams clip = 99;\n').concat(
  '\nmessage ClipParams {\n  // Shape [width], width = the incoming width.\n  Tensor gain = 1;\n  // > 0.\n  double limit = 2;\n}\n',
);
const restoreSchema = usePayloadSchema(CLIP_SCHEMA);
afterAll(() => {
  restoreSchema();
  toy.remove();
});

/** A Layer of the toy kind: the one cast, since the built-in union does not know it. */
const clipOf = (gain: number[], limit: number): Layer => ({ kind: toy.name, gain: Float32Array.from(gain), limit }) as unknown as Layer;

// dense 2 -> 3 (the identity on two of three outputs), then clip with gains (2, 1, -1) and limit 1.5.
const doc = docOf(2, [denseOf([1, 0, 0, 0, 1, 1], [0, 0, 0.5], 'linear'), clipOf([2, 1, -1], 1.5)]);
const x = Float32Array.of(0.5, 1, -1, 3);
// Row 1: z = (0.5, 1, 1.5) -> gain·z = (1, 1, -1.5) -> (1, 1, -1.5). Row 2: z = (-1, 3, 3.5) -> (-2, 3, -3.5) -> (-1.5, 1.5, -1.5).
const byHand = [1, 1, -1.5, -1.5, 1.5, -1.5];
const noFiles = { loadTensorFile: () => Promise.reject(new Error('no files')) };

describe('a toy layer kind registered through the catalogue alone', () => {
  it('the built-in catalogue is typed by every kind: one left out does not compile (held by tsc --noEmit over the tests)', () => {
    // @ts-expect-error dropout is missing
    const missing: LayerCatalogue = { dense, batchnorm };
    const full: LayerCatalogue = { dense, batchnorm, dropout };
    expect(Object.keys(missing)).toEqual(['dense', 'batchnorm']);
    expect(Object.keys(full)).toEqual(builtIn);
  });

  it('is a layer kind while registered (the hook is what adds it), and a name is registered once', () => {
    expect(isLayerKindName('clip')).toBe(true);
    expect(layerKindNames()).toEqual([...builtIn, 'clip']);
    expect(builtIn).toContain('dense');
    expect(() => registerLayerKind(clip)).toThrow(/"clip" is already in the catalogue/);
    expect(modelProblems(doc)).toEqual([]);
  });

  it('runs in the float64 reference (values by hand)', () => {
    const y = referenceForward(doc, toMat64(x, 2, 2)).y.data;
    byHand.forEach((v, i) => expect(y[i]).toBeCloseTo(v, 12));
  });

  for (const engine of ['js', 'wasm'] as const) {
    it(`runs on the tfjs ${engine} engine: values by hand, and parity with the reference per layer`, async () => {
      await useEngine(engine);
      const runner = openRunner(doc, engine);
      try {
        expect(Array.from(runner.run(x, 2))).toEqual(byHand);
        const rows = 30;
        const input = Float32Array.from({ length: rows * 2 }, (_, i) => Math.sin(i * 1.3) * 2);
        const report = parityReport(doc, input, rows, { runner });
        expect(report.pass).toBe(true);
        expect(report.layers.map((l) => l.kind)).toEqual(['dense', 'clip']);
      } finally {
        runner.dispose();
      }
    });
  }

  it('round-trips through encode and decode: the same layer back, and the same bytes when written again', () => {
    const bytes = encodeModel(doc);
    const { doc: loaded } = decodeModel(bytes, 'clip.tdn');
    expect(loaded.layers[1]).toEqual({ kind: 'clip', gain: Float32Array.of(2, 1, -1), limit: 1.5 });
    expect(encodeModel(loaded)).toEqual(bytes);
    expect(modelFacts(loaded, null).layers[1]).toMatchObject({ kind: 'clip', detail: 'limit 1.5', tensors: [{ name: 'layers[1].gain', shape: [3] }] });
  });

  it('is refused by the writer, naming the layer, when the schema has no message for it (protobufjs would drop it silently)', () => {
    restoreSchema();
    try {
      expect(() => encodeModel(doc, 'clip.tdn')).toThrow(ModelFileError);
      expect(() => encodeModel(doc, 'clip.tdn')).toThrow(/layers\[1\]: the file format has no message for layer kind "clip"/);
    } finally {
      usePayloadSchema(CLIP_SCHEMA);
    }
  });

  it('is checked by the file check by its declared fields: the gain against the incoming width, the limit by its rule', () => {
    const problems: { where: string; message: string }[] = [];
    const raw = toPayload(doc, problems);
    expect(problems).toEqual([]);
    const params = (raw.layers[1] as unknown as { clip: { gain: { shape: number[]; data: Uint8Array }; limit: number } }).clip;
    params.limit = 0;
    params.gain.shape = [2];
    params.gain.data = params.gain.data.subarray(0, 8);
    const error = (() => {
      try {
        decodeModel(frame(encodePayload(raw)), 'clip.tdn');
      } catch (e) {
        return e as ModelFileError;
      }
      throw new Error('expected the file check to refuse it');
    })();
    expect(error.problems).toEqual([
      { where: 'layers[1].clip.limit', message: 'limit must be a finite number > 0, got 0' },
      { where: 'layers[1].clip.gain', message: 'shape [2] takes 2 inputs, but layers[0] (dense) gives width 3' },
    ]);
  });

  it('is validated by its declared fields wherever a document comes from', () => {
    const bad = docOf(2, [denseOf([1, 0, 0, 0, 1, 1], [0, 0, 0.5], 'linear'), clipOf([2, NaN], -1)]);
    expect(modelProblems(bad)).toEqual([
      { where: 'layers[1] (clip)', message: 'gain has 2 values, expected [3]' },
      { where: 'layers[1] (clip)', message: 'limit must be a finite number > 0, got -1' },
    ]);
  });

  it('is read from a spec: given fields, declared defaults (gain 1, limit 1), and problems naming its spec fields', async () => {
    const spec = {
      inputs: 2,
      layers: [
        {
          kind: 'dense',
          size: 3,
          weight: [
            [1, 0, 0],
            [0, 1, 1],
          ],
          bias: [0, 0, 0.5],
        },
        { kind: 'clip', gain: [2, 1, -1], limit: 1.5 },
        { kind: 'clip' },
      ],
    };
    const built = await buildFromSpec(spec, 'clip.json', noFiles);
    expect(built.layers[1]).toEqual({ kind: 'clip', gain: Float32Array.of(2, 1, -1), limit: 1.5 });
    expect(built.layers[2]).toEqual({ kind: 'clip', gain: Float32Array.of(1, 1, 1), limit: 1 });
    const broken = { inputs: 2, layers: [{ kind: 'clip', gain: [1, 2, 3], limit: 'high', size: 4 }] };
    const refused = await buildFromSpec(broken, 'clip.json', noFiles).then(
      () => null,
      (e: ModelFileError) => e.problems,
    );
    expect(refused).toEqual([
      { where: 'layers[0].size', message: 'is not a field of a clip layer (fields: kind, gain, limit)' },
      { where: 'layers[0].limit', message: 'must be a finite number > 0, got "high"' },
      { where: 'layers[0].gain', message: 'has 3 values, expected 2' },
    ]);
  });

  it('is refused at open by the fast kernel, fast on threads and int8, naming the engine, the layer index and the kind', () => {
    if (!wasmSimdAvailable()) throw new Error('this runtime lacks WebAssembly SIMD; the fast and int8 engines cannot be tested');
    const opens: [string, () => unknown][] = [
      ['fast', () => new SimdRunner(doc)],
      ['fast', () => openRunner(doc, 'fast')],
      ['fast', () => new SharedMemoryRunner(doc, { arith: 'f32' })],
      ['int8', () => openRunner(doc, 'int8')],
    ];
    // The fast training path says the same of it (tune then falls back to the tfjs path).
    expect(simdTrainBlocker(doc)).toBe('layers[1] is clip: the kernel has no clip operation');
    for (const [engine, open] of opens) {
      let refusal: unknown = null;
      try {
        open();
      } catch (error) {
        refusal = error;
      }
      expect(refusal).toBeInstanceOf(EngineRefusal);
      expect(refusal).toMatchObject({ engine, layerIndex: 1, kind: 'clip', exitCode: 2 });
      expect((refusal as Error).message).toBe(
        `the ${engine} engine cannot run layers[1] (clip): the kernel has no clip operation; open the model with --engine js or wasm`,
      );
    }
  });
});
