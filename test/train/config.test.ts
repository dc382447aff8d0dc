import { describe, it, expect } from 'vitest';
import { TuneConfigError } from '../../src/errors.js';
import type { ModelDoc } from '../../src/model/types.js';
import { resolveTuneOptions, type TuneOptions } from '../../src/train/config.js';

const doc: ModelDoc = {
  inputs: 2,
  features: null,
  labels: null,
  normalise: null,
  layers: [
    { kind: 'dense', size: 2, activation: 'relu', alpha: 0, weight: new Float32Array(4), bias: new Float32Array(2) },
    { kind: 'dense', size: 2, activation: 'softmax', alpha: 0, weight: new Float32Array(4), bias: new Float32Array(2) },
  ],
  meta: { name: 't', description: '', created: '2026-01-01T00:00:00Z', extra: {} },
  provenance: [],
  storage: 'f32',
};

describe('tune options (src/train/config.ts)', () => {
  it.each<[string, TuneOptions, string]>([
    ['lr <= 0', { lr: 0 }, 'lr'],
    ['lr not finite', { lr: Infinity }, 'lr'],
    ['lr NaN', { lr: NaN }, 'lr'],
    ['batch < 1', { batch: 0 }, 'batch'],
    ['batch not whole', { batch: 2.5 }, 'batch'],
    ['epochs < 1', { epochs: 0 }, 'epochs'],
    ['holdout 0', { holdout: 0 }, 'holdout'],
    ['holdout 1', { holdout: 1 }, 'holdout'],
    ['unknown optimizer', { optimizer: 'rmsprop' }, 'optimizer'],
    ['freeze out of range', { freeze: [2] }, 'freeze'],
    ['freeze everything', { freeze: [0, 1] }, 'freeze'],
    ['anchor < 0', { anchor: -1 }, 'anchor'],
    ['momentum 1', { optimizer: 'momentum', momentum: 1 }, 'momentum'],
    ['momentum < 0', { optimizer: 'momentum', momentum: -0.1 }, 'momentum'],
    ['beta2 1', { beta2: 1 }, 'beta2'],
    ['unknown loss', { loss: 'hinge' }, 'loss'],
    ['unknown schedule', { schedule: 'cyclic' }, 'schedule'],
    ['stopAfter without hold-out', { stopAfter: 3 }, 'stopAfter'],
    ['bad tensor name', { freezeTensors: ['layers[0].kernel!'] }, 'freezeTensors'],
    ['clip 0', { clip: 0 }, 'clip'],
    ['replay fraction', { replay: { x: new Float32Array(2), rows: 1, y: Int32Array.of(0) }, replayPerBatch: 1.5 }, 'replayPerBatch'],
    ['replay wrong width', { replay: { x: new Float32Array(3), rows: 1, y: Int32Array.of(0) } }, 'replay'],
  ])('refuses %s up front, naming the option', (_name, opts, option) => {
    let caught: unknown;
    try {
      resolveTuneOptions(opts, doc);
    } catch (e) {
      caught = e;
    }
    expect(caught).toBeInstanceOf(TuneConfigError);
    expect((caught as TuneConfigError).option).toBe(option);
    expect((caught as TuneConfigError).exitCode).toBe(2);
  });

  it('fills defaults (Adam defaults from Kingma & Ba 2015)', () => {
    const r = resolveTuneOptions({}, doc);
    expect(r.optimiser).toEqual({ name: 'adam', beta1: 0.9, beta2: 0.999, epsilon: 1e-8 });
    expect(r.lr).toBe(0.001);
    expect(r.holdout).toEqual({ kind: 'none' });
    expect(resolveTuneOptions({ optimizer: 'momentum', nesterov: true }, doc).optimiser).toEqual({ name: 'momentum', momentum: 0.9, nesterov: true });
  });
});
