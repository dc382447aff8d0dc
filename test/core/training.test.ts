import { afterAll, describe, expect, it } from 'vitest';
import { withinTolerance } from '../../src/check/index.js';
import { TfjsTrainer } from '../../src/engine/index.js';
import { layerKind, mat64, modelWidths, SeededRng, type Layer } from '../../src/model/index.js';
import { referenceBackwardTape, referenceForwardTrain, toMat64 } from '../../src/reference/index.js';
import { trainingContext } from './helpers.js';
import { docOf, dropoutOf, minmaxOf, randomBatchNorm, randomDense } from '../fixtures/models.js';

// A whole network in training mode: the float64 tape against finite differences (common
// practice), and the engine's training forward/backward against the tape within float32 tolerance.
const rng = new SeededRng(61);
const layers: Layer[] = [randomDense(rng, 5, 8, 'tanh'), randomBatchNorm(rng, 8), dropoutOf(0.25), randomDense(rng, 8, 3, 'softmax')];
const doc = docOf(5, layers, minmaxOf(rng, 5));
const rows = 7;
const x = Float32Array.from({ length: rows * 5 }, () => rng.normal());
const targets = Float64Array.from({ length: rows * 3 }, (_, i) => (i % 3 === Math.floor(i / 3) % 3 ? 1 : 0));
const ctx = trainingContext(9);

function crossEntropy(): number {
  const p = referenceForwardTrain(doc, toMat64(x, rows, 5), ctx).y.data;
  let s = 0;
  for (let i = 0; i < p.length; i++) s -= targets[i] * Math.log(p[i]);
  return s;
}

describe('training passes over a whole network', () => {
  const session = new TfjsTrainer(doc);
  afterAll(() => session.dispose());

  const f = referenceForwardTrain(doc, toMat64(x, rows, 5), ctx);
  const dz = mat64(
    rows,
    3,
    f.y.data.map((p, i) => p - targets[i]),
  );
  const back = referenceBackwardTape(doc, f.tape, dz, { dyIsPreActivation: true });

  it('the float64 tape gives the cross-entropy gradient of every parameter (common practice: finite differences)', () => {
    // The parameters are float32, so keep ± h rounds; divide by the step actually taken.
    const h = 2 ** -16;
    let worst = 0;
    doc.layers.forEach((layer, li) => {
      layerKind(layer.kind)
        .trainable(layer, modelWidths(doc)[li], li)
        .forEach((p, pi) => {
          for (let i = 0; i < p.data.length; i += 3) {
            const keep = p.data[i];
            p.data[i] = keep + h;
            const up = crossEntropy();
            const stepUp = p.data[i];
            p.data[i] = keep - h;
            const down = crossEntropy();
            const stepDown = p.data[i];
            p.data[i] = keep;
            const fd = (up - down) / (stepUp - stepDown);
            const a = back.grads[li][pi][i];
            worst = Math.max(worst, Math.abs(a - fd) / Math.max(Math.abs(a), Math.abs(fd), 1e-6));
          }
        });
    });
    expect(worst).toBeLessThan(1e-6);
  });

  it('z is the logits: softmax of z is the output', () => {
    const z = f.z!.data;
    for (let r = 0; r < rows; r++) {
      const e = [0, 1, 2].map((c) => Math.exp(z[r * 3 + c]));
      const sum = e[0] + e[1] + e[2];
      for (let c = 0; c < 3; c++) expect(f.y.data[r * 3 + c]).toBeCloseTo(e[c] / sum, 14);
    }
  });

  it('the engine training forward and backward agree with the reference tape (float32 tolerance)', () => {
    const ef = session.forwardTrain(x, rows, ctx);
    ef.y.forEach((v, i) => expect(withinTolerance(v, f.y.data[i]), `y[${i}]`).toBe(true));
    ef.z!.forEach((v, i) => expect(withinTolerance(v, f.z!.data[i]), `z[${i}]`).toBe(true));
    const bnStats = f.tape[1].stats!;
    ef.stats[1]!.mean.forEach((v, i) => expect(withinTolerance(v, bnStats.mean[i])).toBe(true));
    expect(ef.stats[0]).toBeNull();
    const eg = session.backward(ef.tape, Float32Array.from(dz.data), { dyIsPreActivation: true });
    eg.dx.forEach((v, i) => expect(withinTolerance(v, back.dx.data[i]), `dx[${i}]`).toBe(true));
    eg.grads.forEach((list, li) =>
      list.forEach((g, pi) =>
        g.forEach((v, i) => expect(withinTolerance(v, back.grads[li][pi][i]), `grads[${li}][${pi}][${i}]: ${v} vs ${back.grads[li][pi][i]}`).toBe(true)),
      ),
    );
    expect(eg.grads[2]).toEqual([]);
  });

  it('refuses dyIsPreActivation when the last layer is not dense', () => {
    const bnLast = docOf(5, [randomDense(rng, 5, 4, 'relu'), randomBatchNorm(rng, 4)]);
    const t = referenceForwardTrain(bnLast, toMat64(x, rows, 5), ctx);
    expect(() => referenceBackwardTape(bnLast, t.tape, mat64(rows, 4), { dyIsPreActivation: true })).toThrow(/dense last layer/);
  });
});
