/**
 * A model resident on the engine: weights uploaded once, batches run in bounded chunks, every
 * temporary tensor freed before a call returns. Also the training forward and backward that the
 * train loop builds on. Nothing here imports the reference path.
 */
import * as tf from '@tensorflow/tfjs-core';
import { ShapeError } from '../errors.js';
import { foldTargetScaling, layerKind, modelWidths, validateModel, type BackwardOptions, type BatchStats, type ForwardContext, type ModelDoc, type Normalisation } from '../model/index.js';
import { ensureEngine, type EngineName } from './backend.js';

export interface SessionOptions {
  /** Most rows sent through the engine at once; bounds peak memory. Default 4096. */
  chunkRows?: number;
  /** Names the model in validation errors. */
  source?: string;
}

export const DEFAULT_CHUNK_ROWS = 4096;

const INFERENCE: ForwardContext = {
  training: false,
  dropoutMask: () => {
    throw new Error('dropout masks are not drawn at inference');
  },
};

/** What a training forward kept for backward; opaque to callers, freed by backward or disposeTape. */
export interface EngineTape {
  readonly rows: number;
  readonly saved: tf.Tensor[][];
  disposed: boolean;
}

export interface EngineTrainForward {
  /** Output, rows x outputs. */
  readonly y: Float32Array;
  /** Pre-activation of the last layer (the logits) when it is dense, else null. */
  readonly z: Float32Array | null;
  /** Per layer: batch statistics of batchnorm layers, null elsewhere. */
  readonly stats: (BatchStats | null)[];
  readonly tape: EngineTape;
}

export interface EngineGradients {
  /** dLoss/dInput on the normalised input, rows x inputs. */
  readonly dx: Float32Array;
  /** Per layer, one gradient per trainable parameter in `trainable()` order (empty for dropout). */
  readonly grads: Float32Array[][];
}

/**
 * @example
 * const session = new EngineSession(doc);
 * const y = session.run(features, rows); // Float32Array, rows x outputs
 * session.dispose();
 */
export class EngineSession {
  readonly engine: EngineName;
  readonly chunkRows: number;
  /** Input width, then each layer's output width. */
  readonly widths: readonly number[];
  private readonly tfBackend: string;
  private weights: tf.Tensor[][];
  private norm: { shift: tf.Tensor1D; scale: tf.Tensor1D } | null;
  private disposed = false;

  /** @throws ModelFileError when the document is not usable. */
  readonly doc: ModelDoc;

  constructor(doc: ModelDoc, opts: SessionOptions = {}) {
    // A stored target scaling runs folded into the last dense layer (model/target-scaling.ts).
    this.doc = doc = foldTargetScaling(doc);
    validateModel(doc, opts.source ?? '(model)');
    this.chunkRows = opts.chunkRows ?? DEFAULT_CHUNK_ROWS;
    if (!(Number.isInteger(this.chunkRows) && this.chunkRows > 0)) throw new RangeError(`chunkRows must be a positive integer, got ${this.chunkRows}`);
    this.engine = ensureEngine();
    this.tfBackend = tf.getBackend();
    this.widths = modelWidths(doc);
    this.weights = doc.layers.map((layer) => layerKind(layer.kind).engine.upload(layer).map((t) => tf.keep(t)));
    this.norm = uploadNormalisation(doc.normalise, doc.inputs);
  }

  get inputs(): number {
    return this.widths[0];
  }

  get outputs(): number {
    return this.widths[this.widths.length - 1];
  }

  /**
   * Inference on raw features (rows x inputs, row-major); returns rows x outputs.
   * @example session.run(Float32Array.of(0.05, 0.1), 1)
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array {
    this.checkInput(data, rows, 'run');
    const out = new Float32Array(rows * this.outputs);
    this.eachChunk(rows, (start, n) => {
      tf.tidy(() => {
        const y = this.forwardTensor(this.chunkTensor(data, start, n));
        out.set(y.dataSync(), start * this.outputs);
      });
    });
    return out;
  }

  /**
   * Inference on a tensor of raw features, in one piece. The result belongs to the caller,
   * who disposes it; the input is left alone.
   */
  runTensor(x: tf.Tensor2D): tf.Tensor2D {
    this.checkUsable('runTensor');
    if (x.shape[1] !== this.inputs) throw new ShapeError('input', ['rows', this.inputs], x.shape, 'EngineSession.runTensor');
    return tf.tidy(() => this.forwardTensor(x));
  }

  /** Each layer's output for raw features (rows x width per layer), for the parity report. */
  runLayers(data: Float32Array, rows: number): Float32Array[] {
    this.checkInput(data, rows, 'runLayers');
    const outs = this.widths.slice(1).map((w) => new Float32Array(rows * w));
    this.eachChunk(rows, (start, n) => {
      tf.tidy(() => {
        let h = this.normaliseTensor(this.chunkTensor(data, start, n));
        this.doc.layers.forEach((layer, i) => {
          h = layerKind(layer.kind).engine.forward(layer, this.weights[i], h, INFERENCE, i).y;
          outs[i].set(h.dataSync(), start * this.widths[i + 1]);
        });
      });
    });
    return outs;
  }

  /**
   * A training forward on one mini-batch: dropout draws from ctx, batchnorm uses batch
   * statistics (returned in `stats`). Keep the tape for backward, or free it with disposeTape.
   * @example const f = session.forwardTrain(batch, rows, ctx); const g = session.backward(f.tape, dLoss);
   */
  forwardTrain(data: Float32Array, rows: number, ctx: ForwardContext): EngineTrainForward {
    this.checkInput(data, rows, 'forwardTrain');
    // slice(): the tape may hold the input, and the caller may refill its batch buffer before backward.
    let h = tf.tidy(() => this.normaliseTensor(tf.tensor2d(data.slice(0, rows * this.inputs), [rows, this.inputs])));
    const saved: tf.Tensor[][] = [];
    const stats: (BatchStats | null)[] = [];
    let z: Float32Array | null = null;
    const last = this.doc.layers.length - 1;
    this.doc.layers.forEach((layer, i) => {
      let layerStats: BatchStats | null = null;
      let zIndex = -1;
      const input = h;
      const kept = tf.tidy(() => {
        const out = layerKind(layer.kind).engine.forward(layer, this.weights[i], input, ctx, i);
        layerStats = out.stats ?? null;
        zIndex = out.z ? out.saved.indexOf(out.z) : -1;
        // A separate handle for the running activation, so freeing it never frees a saved tensor.
        return [tf.clone(out.y), ...out.saved];
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
  backward(tape: EngineTape, dyOrDz: Float32Array, opts: BackwardOptions = {}): EngineGradients {
    this.checkUsable('backward');
    if (tape.disposed) throw new Error('EngineSession.backward: this tape was already used or disposed');
    const last = this.doc.layers.length - 1;
    if (opts.dyIsPreActivation && this.doc.layers[last].kind !== 'dense') {
      throw new Error(`dyIsPreActivation needs a dense last layer; layers[${last}] is ${this.doc.layers[last].kind}`);
    }
    if (dyOrDz.length !== tape.rows * this.outputs) {
      throw new ShapeError('dLoss/dy', [tape.rows, this.outputs], [dyOrDz.length], 'EngineSession.backward');
    }
    const grads: Float32Array[][] = new Array(this.doc.layers.length);
    let d: tf.Tensor2D = tf.tensor2d(dyOrDz.slice(), [tape.rows, this.outputs]);
    try {
      for (let i = last; i >= 0; i--) {
        const layer = this.doc.layers[i];
        const incoming = d;
        const kept = tf.tidy(() => {
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
  disposeTape(tape: EngineTape): void {
    if (tape.disposed) return;
    for (const list of tape.saved) tf.dispose(list);
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
      tf.dispose(this.weights[i]);
      this.weights[i] = layerKind(layer.kind).engine.upload(layer).map((t) => tf.keep(t));
    }
    if (layerIndex === undefined) {
      if (this.norm) tf.dispose([this.norm.shift, this.norm.scale]);
      this.norm = uploadNormalisation(this.doc.normalise, this.doc.inputs);
    }
  }

  /** Free every tensor the session holds. The session cannot be used afterwards. */
  dispose(): void {
    if (this.disposed) return;
    for (const w of this.weights) tf.dispose(w);
    if (this.norm) tf.dispose([this.norm.shift, this.norm.scale]);
    this.weights = [];
    this.norm = null;
    this.disposed = true;
  }

  private forwardTensor(x: tf.Tensor2D): tf.Tensor2D {
    let h = this.normaliseTensor(x);
    this.doc.layers.forEach((layer, i) => {
      h = layerKind(layer.kind).engine.forward(layer, this.weights[i], h, INFERENCE, i).y;
    });
    return h;
  }

  private normaliseTensor(x: tf.Tensor2D): tf.Tensor2D {
    if (!this.norm) return x;
    // (x - shift) · scale rather than x·scale + offset: subtracting first keeps the float32
    // error relative to the centred value, not to the raw feature's magnitude.
    return tf.mul(tf.sub(x, this.norm.shift), this.norm.scale);
  }

  private chunkTensor(data: Float32Array, start: number, n: number): tf.Tensor2D {
    return tf.tensor2d(data.subarray(start * this.inputs, (start + n) * this.inputs), [n, this.inputs]);
  }

  private eachChunk(rows: number, fn: (start: number, n: number) => void): void {
    for (let start = 0; start < rows; start += this.chunkRows) fn(start, Math.min(this.chunkRows, rows - start));
  }

  private checkInput(data: Float32Array, rows: number, fn: string): void {
    this.checkUsable(fn);
    if (!(Number.isInteger(rows) && rows >= 0) || data.length !== rows * this.inputs) {
      throw new ShapeError('input', [`${rows} x ${this.inputs} = ${rows * this.inputs} values`], [data.length], `EngineSession.${fn}`);
    }
  }

  private checkUsable(fn: string): void {
    if (this.disposed) throw new Error(`EngineSession.${fn}: the session was disposed`);
    const now = tf.getBackend();
    if (now !== this.tfBackend) {
      // tfjs has one global backend; weights uploaded under one must not silently migrate.
      throw new Error(`EngineSession.${fn}: the session was made on tfjs backend '${this.tfBackend}', but the process now runs '${now}'; make a new session`);
    }
  }
}

/**
 * The normalisation as a subtract-then-multiply pair of per-feature tensors, folded in float64:
 * zscore: shift = mean, scale = 1/std; minmax: shift = min, scale = 1/(max - min).
 * Zero spread gives scale 0, so the feature maps to 0, as on the reference path.
 */
function uploadNormalisation(n: Normalisation | null, inputs: number): { shift: tf.Tensor1D; scale: tf.Tensor1D } | null {
  if (!n) return null;
  const centre = n.method === 'zscore' ? n.mean : n.min;
  if (!centre) return null;
  const shift = new Float32Array(inputs);
  const scale = new Float32Array(inputs);
  for (let c = 0; c < inputs; c++) {
    let spread: number;
    if (n.method === 'zscore') {
      if (!n.std) return null;
      spread = n.std[c];
    } else {
      if (!n.max) return null;
      spread = n.max[c] - centre[c];
    }
    shift[c] = centre[c];
    scale[c] = spread === 0 ? 0 : 1 / spread;
  }
  return { shift: tf.keep(tf.tensor1d(shift)), scale: tf.keep(tf.tensor1d(scale)) };
}
