import { describe, expect, it } from 'vitest';
import { docOf, denseOf } from '../fixtures/models.js';
import { decodeModel, encodeModel } from '../../src/format/index.js';
import { modelProblems } from '../../src/model/index.js';
import { buildFromSpec } from '../../src/spec/spec.js';

const noFiles = { loadTensorFile: () => Promise.reject(new Error('no files')) };

function bnDoc(momentum: number) {
  const bn = {
    kind: 'batchnorm' as const,
    gamma: Float32Array.of(1, 1),
    beta: Float32Array.of(0, 0),
    runningMean: Float32Array.of(0, 0),
    runningVariance: Float32Array.of(1, 1),
    epsilon: 1e-5,
    momentum,
  };
  return docOf(2, [bn, denseOf([1, 0, 0, 1], [0, 0], 'linear')]);
}

/** What each reader says of a batch-norm momentum: validation, the file check, and the spec behind pack. */
async function verdicts(momentum: number): Promise<{ validate: string; file: string; spec: string }> {
  const doc = bnDoc(momentum);
  const validate = modelProblems(doc)
    .map((p) => p.message)
    .join('; ');
  let file = '';
  try {
    decodeModel(encodeModel(doc), '(file)');
  } catch (error) {
    file = (error as Error).message;
  }
  let spec = '';
  await buildFromSpec({ inputs: 2, layers: [{ kind: 'batchnorm', momentum }] }, 'spec.json', noFiles).catch((e: Error) => (spec = e.message));
  return { validate, file, spec };
}

describe('one rule per attribute, wherever a layer is read (batch-norm momentum in [0, 1])', () => {
  it('momentum 1 (running statistics frozen) is accepted by validation, the file and pack alike', async () => {
    expect(await verdicts(1)).toEqual({ validate: '', file: '', spec: '' });
    expect(decodeModel(encodeModel(bnDoc(1)), '(m)').doc.layers[0]).toMatchObject({ momentum: 1 });
  });

  it.each([1.5, -0.1])('momentum %s is refused by all three with the same rule', async (momentum) => {
    const v = await verdicts(momentum);
    for (const message of [v.validate, v.file, v.spec]) expect(message).toMatch(/momentum:? must be in \[0, 1\], got -?[0-9.]+/);
  });
});
