/**
 * A model resident on a tfjs engine (js or wasm): weights uploaded once, batches run in bounded
 * chunks, every temporary tensor freed before a call returns. The training forward and backward
 * build on it in tfjs-trainer.ts. Nothing here imports the reference path.
 */
import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from '../model/tfjs-lazy.js';
import { ShapeError } from '../errors.js';
import { inputShiftScale, layerKind, modelWidths, validateModel, type ForwardContext, type ModelDoc, type Normalisation } from '../model/index.js';
import { ensureEngine, type EngineName } from './backend.js';
import type { Runner } from './runner.js';

export interface TfjsRunnerOptions {
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

/**
 * @example
 * const runner = new TfjsRunner(doc); // or openRunner(doc, 'js')
 * const y = runner.run(features, rows); // Float32Array, rows x outputs
 * runner.dispose();
 */
export class TfjsRunner implements Runner {
  readonly engine: EngineName;
  readonly chunkRows: number;
  /** Input width, then each layer's output width. */
  readonly widths: readonly number[];
  private readonly tfBackend: string;
  protected weights: tf.Tensor[][];
  protected norm: { shift: tf.Tensor1D; scale: tf.Tensor1D } | null;
  private disposed = false;

  /** @throws ModelFileError when the document is not usable. */
  constructor(
    readonly doc: ModelDoc,
    opts: TfjsRunnerOptions = {},
  ) {
    validateModel(doc, opts.source ?? '(model)');
    this.chunkRows = opts.chunkRows ?? DEFAULT_CHUNK_ROWS;
    if (!(Number.isInteger(this.chunkRows) && this.chunkRows > 0)) throw new RangeError(`chunkRows must be a positive integer, got ${this.chunkRows}`);
    this.engine = ensureEngine();
    this.tfBackend = tfjs().getBackend();
    this.widths = modelWidths(doc);
    this.weights = doc.layers.map((layer) =>
      layerKind(layer.kind)
        .engine.upload(layer)
        .map((t) => tfjs().keep(t)),
    );
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
   * @example runner.run(Float32Array.of(0.05, 0.1), 1)
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array {
    this.checkInput(data, rows, 'run');
    const out = new Float32Array(rows * this.outputs);
    this.eachChunk(rows, (start, n) => {
      tfjs().tidy(() => {
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
    if (x.shape[1] !== this.inputs) throw new ShapeError('input', ['rows', this.inputs], x.shape, 'TfjsRunner.runTensor');
    return tfjs().tidy(() => this.forwardTensor(x));
  }

  /** Each layer's output for raw features (rows x width per layer), for the parity report. */
  runLayers(data: Float32Array, rows: number): Float32Array[] {
    this.checkInput(data, rows, 'runLayers');
    const outs = this.widths.slice(1).map((w) => new Float32Array(rows * w));
    this.eachChunk(rows, (start, n) => {
      tfjs().tidy(() => {
        let h = this.normaliseTensor(this.chunkTensor(data, start, n));
        this.doc.layers.forEach((layer, i) => {
          h = layerKind(layer.kind).engine.forward(layer, this.weights[i], h, INFERENCE, i).y;
          outs[i].set(h.dataSync(), start * this.widths[i + 1]);
        });
      });
    });
    return outs;
  }

  /** Free every tensor the runner holds. The runner cannot be used afterwards. */
  dispose(): void {
    if (this.disposed) return;
    for (const w of this.weights) tfjs().dispose(w);
    if (this.norm) tfjs().dispose([this.norm.shift, this.norm.scale]);
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

  protected normaliseTensor(x: tf.Tensor2D): tf.Tensor2D {
    if (!this.norm) return x;
    // (x - shift) · scale rather than x·scale + offset: subtracting first keeps the float32
    // error relative to the centred value, not to the raw feature's magnitude.
    return tfjs().mul(tfjs().sub(x, this.norm.shift), this.norm.scale);
  }

  private chunkTensor(data: Float32Array, start: number, n: number): tf.Tensor2D {
    return tfjs().tensor2d(data.subarray(start * this.inputs, (start + n) * this.inputs), [n, this.inputs]);
  }

  private eachChunk(rows: number, fn: (start: number, n: number) => void): void {
    for (let start = 0; start < rows; start += this.chunkRows) fn(start, Math.min(this.chunkRows, rows - start));
  }

  protected checkInput(data: Float32Array, rows: number, fn: string): void {
    this.checkUsable(fn);
    if (!(Number.isInteger(rows) && rows >= 0) || data.length !== rows * this.inputs) {
      throw new ShapeError('input', [`${rows} x ${this.inputs} = ${rows * this.inputs} values`], [data.length], `TfjsRunner.${fn}`);
    }
  }

  protected checkUsable(fn: string): void {
    if (this.disposed) throw new Error(`TfjsRunner.${fn}: the runner was disposed`);
    const now = tfjs().getBackend();
    if (now !== this.tfBackend) {
      // tfjs has one global backend; weights uploaded under one must not silently migrate.
      throw new Error(`TfjsRunner.${fn}: the runner was made on tfjs backend '${this.tfBackend}', but the process now runs '${now}'; open a new runner`);
    }
  }
}

/** The input normalisation (model/input-affine.ts) as two resident per-feature tensors. */
export function uploadNormalisation(n: Normalisation | null, inputs: number): { shift: tf.Tensor1D; scale: tf.Tensor1D } | null {
  const pair = inputShiftScale(n, inputs);
  return pair && { shift: tfjs().keep(tfjs().tensor1d(pair.shift)), scale: tfjs().keep(tfjs().tensor1d(pair.scale)) };
}
