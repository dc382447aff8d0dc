/**
 * The training forward and backward the train loop builds on, over a model resident on a tfjs
 * engine: a `TfjsRunner` (whose inference it shares) that also keeps tapes for backward and
 * re-uploads weights after an optimiser step.
 */
import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from '../model/tfjs-lazy.js';
import { ShapeError } from '../errors.js';
import { layerKind, type BackwardOptions, type BatchStats, type ForwardContext } from '../model/index.js';
import { TfjsRunner, uploadNormalisation } from './tfjs-runner.js';

/** What a training forward kept for backward; opaque to callers, freed by backward or disposeTape. */
export interface TfjsTape {
  readonly rows: number;
  readonly saved: tf.Tensor[][];
  disposed: boolean;
}

export interface TfjsTrainForward {
  /** Output, rows x outputs. */
  readonly y: Float32Array;
  /** Pre-activation of the last layer (the logits) when it is dense, else null. */
  readonly z: Float32Array | null;
  /** Per layer: batch statistics of batchnorm layers, null elsewhere. */
  readonly stats: (BatchStats | null)[];
  readonly tape: TfjsTape;
}

export interface TfjsGradients {
  /** dLoss/dInput on the normalised input, rows x inputs. */
  readonly dx: Float32Array;
  /** Per layer, one gradient per trainable parameter in `trainable()` order (empty for dropout). */
  readonly grads: Float32Array[][];
}

/**
 * @example
 * const trainer = new TfjsTrainer(doc);
 * const f = trainer.forwardTrain(batch, rows, ctx);
 * const { grads } = trainer.backward(f.tape, dLoss);
 * // ...optimiser changes doc's arrays...
 * trainer.refreshWeights();
 */
export class TfjsTrainer extends TfjsRunner {
  /**
   * A training forward on one mini-batch: dropout draws from ctx, batchnorm uses batch
   * statistics (returned in `stats`). Keep the tape for backward, or free it with disposeTape.
   * @example const f = trainer.forwardTrain(batch, rows, ctx); const g = trainer.backward(f.tape, dLoss);
   */
  forwardTrain(data: Float32Array, rows: number, ctx: ForwardContext): TfjsTrainForward {
    this.checkInput(data, rows, 'forwardTrain');
    // slice(): the tape may hold the input, and the caller may refill its batch buffer before backward.
    let h = tfjs().tidy(() => this.normaliseTensor(tfjs().tensor2d(data.slice(0, rows * this.inputs), [rows, this.inputs])));
    const saved: tf.Tensor[][] = [];
    const stats: (BatchStats | null)[] = [];
    let z: Float32Array | null = null;
    const last = this.doc.layers.length - 1;
    this.doc.layers.forEach((layer, i) => {
      let layerStats: BatchStats | null = null;
      let zIndex = -1;
      const input = h;
      const kept = tfjs().tidy(() => {
        const out = layerKind(layer.kind).engine.forward(layer, this.weights[i], input, ctx, i);
        layerStats = out.stats ?? null;
        zIndex = out.z ? out.saved.indexOf(out.z) : -1;
        // A separate handle for the running activation, so freeing it never frees a saved tensor.
        return [tfjs().clone(out.y), ...out.saved];
      });
      input.dispose();
      h = kept[0] as tf.Tensor2D;
      saved.push(kept.slice(1));
      stats.push(layerStats);
      if (i === last && zIndex >= 0) z = Float32Array.from(kept[1 + zIndex].dataSync());
    });
    const y = Float32Array.from(h.dataSync());
    h.dispose();
    return { y, z, stats, tape: { rows, saved, disposed: false } };
  }

  /**
   * Backward over a tape from forwardTrain; frees the tape. `dyOrDz` is dLoss/dy on the output
   * (rows x outputs) or, with dyIsPreActivation, dLoss/dz on the last dense layer's pre-activation.
   * @throws Error when dyIsPreActivation is set and the last layer is not dense.
   */
  backward(tape: TfjsTape, dyOrDz: Float32Array, opts: BackwardOptions = {}): TfjsGradients {
    this.checkUsable('backward');
    if (tape.disposed) throw new Error('TfjsTrainer.backward: this tape was already used or disposed');
    const last = this.doc.layers.length - 1;
    if (opts.dyIsPreActivation && this.doc.layers[last].kind !== 'dense') {
      throw new Error(`dyIsPreActivation needs a dense last layer; layers[${last}] is ${this.doc.layers[last].kind}`);
    }
    if (dyOrDz.length !== tape.rows * this.outputs) {
      throw new ShapeError('dLoss/dy', [tape.rows, this.outputs], [dyOrDz.length], 'TfjsTrainer.backward');
    }
    const grads: Float32Array[][] = new Array(this.doc.layers.length);
    let d: tf.Tensor2D = tfjs().tensor2d(dyOrDz.slice(), [tape.rows, this.outputs]);
    try {
      for (let i = last; i >= 0; i--) {
        const layer = this.doc.layers[i];
        const incoming = d;
        const kept = tfjs().tidy(() => {
          const back = layerKind(layer.kind).engine.backward(layer, this.weights[i], tape.saved[i], incoming, i === last ? opts : {});
          return [back.dx, ...back.grads];
        });
        incoming.dispose();
        d = kept[0] as tf.Tensor2D;
        grads[i] = kept.slice(1).map((g) => {
          const data = Float32Array.from(g.dataSync());
          g.dispose();
          return data;
        });
      }
      return { dx: Float32Array.from(d.dataSync()), grads };
    } finally {
      d.dispose();
      this.disposeTape(tape);
    }
  }

  /** Free a tape without running backward. */
  disposeTape(tape: TfjsTape): void {
    if (tape.disposed) return;
    for (const list of tape.saved) tfjs().dispose(list);
    tape.disposed = true;
  }

  /**
   * Re-upload weights after the caller changed the document's arrays (e.g. after an optimiser
   * step): one layer, or every layer and the input normalisation when no index is given.
   */
  refreshWeights(layerIndex?: number): void {
    this.checkUsable('refreshWeights');
    const indices = layerIndex === undefined ? this.doc.layers.map((_, i) => i) : [layerIndex];
    for (const i of indices) {
      const layer = this.doc.layers[i];
      if (!layer) throw new RangeError(`refreshWeights: no layer ${i} (model has ${this.doc.layers.length})`);
      tfjs().dispose(this.weights[i]);
      this.weights[i] = layerKind(layer.kind)
        .engine.upload(layer)
        .map((t) => tfjs().keep(t));
    }
    if (layerIndex === undefined) {
      if (this.norm) tfjs().dispose([this.norm.shift, this.norm.scale]);
      this.norm = uploadNormalisation(this.doc.normalise, this.doc.inputs);
    }
  }
}
