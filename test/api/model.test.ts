/**
 * The façade a service uses: openModel / modelFromDocument / run in its three input forms /
 * check / save. Forward values from the worked example of Mazur 2015 ("A Step by Step
 * Backpropagation Example"): out_o1 = 0.75136507, out_o2 = 0.772928465.
 */
import * as tf from '@tensorflow/tfjs-core';
import { mkdtemp, readFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { DataError, ShapeError, modelFromDocument, openModel, type ModelDoc, type TendonModel } from '../../src/index.js';

function mazurDoc(): ModelDoc {
  return {
    inputs: 2,
    features: ['i1', 'i2'],
    labels: ['o1', 'o2'],
    normalise: null,
    layers: [
      { kind: 'dense', size: 2, activation: 'sigmoid', alpha: 0, weight: Float32Array.of(0.15, 0.25, 0.2, 0.3), bias: Float32Array.of(0.35, 0.35) },
      { kind: 'dense', size: 2, activation: 'sigmoid', alpha: 0, weight: Float32Array.of(0.4, 0.5, 0.45, 0.55), bias: Float32Array.of(0.6, 0.6) },
    ],
    meta: { name: 'mazur', description: '', created: '2026-01-01T00:00:00.000Z', extra: {} },
    provenance: [],
    storage: 'f32',
  };
}

const opened: TendonModel[] = [];
afterAll(() => opened.forEach((m) => m.dispose()));

describe('TendonModel.run', () => {
  it('takes rows as arrays, a Float32Array with a row count, or a 2-D tensor, and agrees with Mazur 2015', async () => {
    const model = await modelFromDocument(mazurDoc(), { engine: 'js' });
    opened.push(model);
    const arrays = model.run([
      [0.05, 0.1],
      [0.05, 0.1],
    ]);
    expect(arrays).toHaveLength(2);
    expect(arrays[0][0]).toBeCloseTo(0.75136507, 6);
    expect(arrays[1][1]).toBeCloseTo(0.772928465, 6);
    const flat = model.run(Float32Array.of(0.05, 0.1), 1);
    expect(Array.from(flat)).toEqual(arrays[0]);
    const before = tf.memory().numTensors;
    const input = tf.tensor2d([[0.05, 0.1]]);
    const out = model.run(input);
    expect(out.shape).toEqual([1, 2]);
    expect(Array.from(out.dataSync())).toEqual(arrays[0]);
    tf.dispose([input, out]);
    expect(tf.memory().numTensors).toBe(before);
  });

  it('refuses rows of the wrong width and cells that are not numbers, naming row and column', async () => {
    const model = await modelFromDocument(mazurDoc(), { engine: 'js' });
    opened.push(model);
    expect(() => model.run([[0.05, 0.1, 3]])).toThrow(ShapeError);
    expect(() => model.run(Float32Array.of(1, 2, 3), 2)).toThrow(ShapeError);
    const bad = [
      [0.05, 0.1],
      [0.05, 'x' as unknown as number],
    ];
    expect(() => model.run(bad)).toThrow(DataError);
    expect(() => model.run(bad)).toThrow(/:2:2: "x" is not a number/);
  });

  it('save writes a file that openModel reads back with the same outputs and a checksum', async () => {
    const dir = await mkdtemp(join(tmpdir(), 'tendon-api-'));
    const model = await modelFromDocument(mazurDoc(), { engine: 'js' });
    opened.push(model);
    const path = join(dir, 'm.tendon');
    const written = await model.save(path);
    const again = await openModel(path);
    opened.push(again);
    expect(again.checksum).toBe(written.checksum);
    expect(again.fileBytes).toBe((await readFile(path)).length);
    expect(again.run([[0.05, 0.1]])).toEqual(model.run([[0.05, 0.1]]));
  });

  it('check reports parity per layer and at the output within the float32 tolerance', async () => {
    const model = await modelFromDocument(mazurDoc(), { engine: 'js' });
    opened.push(model);
    const report = model.check({ x: Float32Array.of(0.05, 0.1, 1, -1), rows: 2 });
    expect(report.pass).toBe(true);
    expect(report.layers).toHaveLength(2);
    expect(report.output.maxAbs).toBeLessThan(1e-6);
    expect(report.output.topClassAgreement).toBe(1);
  });

  it.each(['js', 'wasm', 'fast'] as const)('the %s engine gives the worked example and passes its own parity check', async (engine) => {
    const model = await modelFromDocument(mazurDoc(), { engine });
    opened.push(model);
    expect(model.engine).toBe(engine);
    const [o] = model.run([[0.05, 0.1]]);
    expect(o[0]).toBeCloseTo(0.75136507, 6);
    expect(o[1]).toBeCloseTo(0.772928465, 6);
    const input = tf.tensor2d([[0.05, 0.1]]);
    const out = model.run(input);
    expect(Array.from(out.dataSync())).toEqual(o);
    tf.dispose([input, out]);
    expect(model.check().pass).toBe(true);
  });
});
