/**
 * A plain mini-batch SGD loop on the fast kernel's training forward and backward, to measure
 * what a training step costs there: softmax cross-entropy from logits (gradient p - t, averaged
 * over the batch), then W -= lr·dW, b -= lr·db, then the weights are copied into the kernel again.
 */
import { FastTrainSession } from '../engine/fast/fast-train.js';
import type { ForwardContext, ModelDoc } from '../model/index.js';

const NO_DROPOUT: ForwardContext = {
  training: true,
  dropoutMask: () => {
    throw new Error('the measured network has no dropout');
  },
};

/**
 * One epoch over `rows` rows in batches of `batch`; returns training rows per second and the
 * mean loss of the first and last batch (so a caller can see it learns).
 * @example fastSgdEpoch(denseStackDoc([784, 256, 10], 3, 'relu', 'softmax'), x, labels, 4096, 64, 0.01)
 */
export function fastSgdEpoch(doc: ModelDoc, x: Float32Array, labels: Int32Array, rows: number, batch: number, lr: number): { rowsPerSec: number; firstLoss: number; lastLoss: number } {
  const session = new FastTrainSession(doc, { preActivation: true });
  const inputs = doc.inputs;
  const outputs = session.outputs;
  let firstLoss = Number.NaN;
  let lastLoss = Number.NaN;
  const started = performance.now();
  for (let start = 0; start + batch <= rows; start += batch) {
    const f = session.forwardTrain(x.subarray(start * inputs, (start + batch) * inputs), batch, NO_DROPOUT);
    const dLogits = new Float32Array(batch * outputs);
    let loss = 0;
    for (let r = 0; r < batch; r++) {
      const o = r * outputs;
      let max = -Infinity;
      for (let c = 0; c < outputs; c++) max = Math.max(max, f.out[o + c]);
      let sum = 0;
      for (let c = 0; c < outputs; c++) sum += Math.exp(f.out[o + c] - max);
      const label = labels[start + r];
      loss += Math.log(sum) + max - f.out[o + label];
      for (let c = 0; c < outputs; c++) dLogits[o + c] = (Math.exp(f.out[o + c] - max) / sum - (c === label ? 1 : 0)) / batch;
    }
    loss /= batch;
    if (Number.isNaN(firstLoss)) firstLoss = loss;
    lastLoss = loss;
    const grads = session.backward(f, dLogits);
    doc.layers.forEach((layer, i) => {
      if (layer.kind !== 'dense') return;
      const [dW, db] = grads[i];
      for (let k = 0; k < dW.length; k++) layer.weight[k] -= lr * dW[k];
      for (let k = 0; k < db.length; k++) layer.bias[k] -= lr * db[k];
    });
    session.refresh();
  }
  const seconds = (performance.now() - started) / 1000;
  return { rowsPerSec: (Math.floor(rows / batch) * batch) / seconds, firstLoss, lastLoss };
}
