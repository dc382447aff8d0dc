/**
 * Inference on our own WebAssembly SIMD dense kernel, without tfjs: weights copied once into the
 * kernel's memory (columns padded to a multiple of 16 with zeros), input and activation buffers
 * allocated once and reused for every call, ReLU fused into the kernel's store. Other
 * activations, batch normalisation and input normalisation run as float32 passes in JS.
 *
 * Why: at one row, tfjs's per-op bookkeeping (tensor records, scopes, kernel lookup) costs as
 * much as the arithmetic; at 256 rows this kernel's register tiling beats the tfjs wasm
 * backend's matrix product. Parity with the float64 reference is held in the tests.
 */
import { ShapeError } from '../../errors.js';
import { batchNormAffine, inputShiftScale, modelWidths, validateModel, type ActivationName, type Layer, type ModelDoc } from '../../model/index.js';
import type { Runner } from '../runner.js';
import { instantiateDenseKernel, padded, type DenseKernel, type KernelOptions } from './dense-kernel.js';

type Step =
  | { readonly kind: 'dense'; readonly w: number; readonly b: number; readonly nIn: number; readonly out: number; readonly outP: number; readonly relu: boolean; readonly activation: ActivationName; readonly alpha: number }
  | { readonly kind: 'affine'; readonly width: number; readonly scale: Float32Array; readonly shift: Float32Array };

export interface SimdRunnerOptions {
  /** Rows per kernel pass; bounds the activation buffers. Default 256. */
  readonly chunkRows?: number;
  /** Names the model in validation errors. */
  readonly source?: string;
  /** Kernel choices (tests and benchmarks compare the fused and plain multiply-add). */
  readonly kernel?: KernelOptions;
}

/**
 * The `fast` engine's runner.
 * @example
 * const fast = new SimdRunner(doc); // or openRunner(doc, 'fast')
 * const y = fast.run(features, rows); // Float32Array rows x outputs, owned by the caller
 * @throws ModelFileError when the document is not usable; Error when WebAssembly SIMD is missing.
 */
export class SimdRunner implements Runner {
  readonly engine = 'fast' as const;
  readonly inputs: number;
  readonly outputs: number;
  readonly chunkRows: number;
  private readonly kernel: DenseKernel;
  private readonly steps: Step[];
  private readonly norm: { shift: Float32Array; scale: Float32Array } | null;
  /** Byte addresses of the input buffer and the two activation buffers. */
  private readonly xAddr: number;
  private readonly bufAddr: [number, number];
  private readonly kernelOptions: KernelOptions;
  private disposed = false;

  constructor(
    readonly doc: ModelDoc,
    opts: SimdRunnerOptions = {},
  ) {
    validateModel(doc, opts.source ?? '(model)');
    const widths = modelWidths(doc);
    this.inputs = widths[0];
    this.outputs = widths[widths.length - 1];
    this.chunkRows = opts.chunkRows ?? 256;
    if (!(Number.isInteger(this.chunkRows) && this.chunkRows > 0)) throw new RangeError(`chunkRows must be a positive integer, got ${this.chunkRows}`);

    // Plan the memory: weights first, then the input chunk and two activation buffers.
    let bytes = 0;
    const plan: { layer: Layer; width: number; wAt: number; bAt: number }[] = [];
    let width = this.inputs; // floats per row of the current activation
    let maxWidth = 0;
    for (const layer of doc.layers) {
      if (layer.kind === 'dense') {
        const outP = padded(layer.size);
        plan.push({ layer, width, wAt: bytes, bAt: bytes + width * outP * 4 });
        bytes += (width * outP + outP) * 4;
        width = outP;
        maxWidth = Math.max(maxWidth, outP);
      } else {
        plan.push({ layer, width, wAt: -1, bAt: -1 });
      }
    }
    maxWidth = Math.max(maxWidth, width);
    this.xAddr = bytes;
    bytes += this.chunkRows * this.inputs * 4;
    this.bufAddr = [bytes, bytes + this.chunkRows * maxWidth * 4];
    bytes += 2 * this.chunkRows * maxWidth * 4;
    this.kernelOptions = opts.kernel ?? {};
    this.kernel = instantiateDenseKernel(bytes, this.kernelOptions);
    const mem = new Float32Array(this.kernel.memory.buffer);

    this.steps = [];
    const realWidths = widths.slice(0, -1);
    plan.forEach(({ layer, width: inWidth, wAt, bAt }, i) => {
      if (layer.kind === 'dense') {
        const outP = padded(layer.size);
        const realIn = realWidths[i];
        // W rows beyond the real inputs (padding of the previous layer) stay zero.
        for (let k = 0; k < realIn; k++) mem.set(layer.weight.subarray(k * layer.size, (k + 1) * layer.size), wAt / 4 + k * outP);
        mem.set(layer.bias, bAt / 4);
        this.steps.push({ kind: 'dense', w: wAt, b: bAt, nIn: inWidth, out: layer.size, outP, relu: layer.activation === 'relu', activation: layer.activation, alpha: layer.alpha });
      } else if (layer.kind === 'batchnorm') {
        // Inference form folded in float64 and rounded once: y = x * scale + shift.
        const affine = batchNormAffine(layer);
        this.steps.push({ kind: 'affine', width: inWidth, scale: Float32Array.from(affine.scale), shift: Float32Array.from(affine.shift) });
      }
      // dropout: identity at inference.
    });
    this.norm = inputShiftScale(doc.normalise, this.inputs);
  }

  /**
   * Inference on raw features (rows x inputs, row-major); returns a new rows x outputs array.
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array {
    if (this.disposed) throw new Error('SimdRunner.run: this runner was disposed');
    if (!(Number.isInteger(rows) && rows >= 0) || data.length !== rows * this.inputs) {
      throw new ShapeError('input', [`${rows} x ${this.inputs} = ${rows * this.inputs} values`], [data.length], 'SimdRunner.run');
    }
    const out = new Float32Array(rows * this.outputs);
    // The memory never grows, so this view stays valid.
    const mem = new Float32Array(this.kernel.memory.buffer);
    for (let start = 0; start < rows; start += this.chunkRows) {
      const n = Math.min(this.chunkRows, rows - start);
      const x = data.subarray(start * this.inputs, (start + n) * this.inputs);
      const xAt = this.xAddr / 4;
      mem.set(x, xAt);
      if (this.norm) {
        const { shift, scale } = this.norm;
        const f = this.inputs;
        for (let r = 0, i = xAt; r < n; r++) {
          for (let c = 0; c < f; c++, i++) mem[i] = (mem[i] - shift[c]) * scale[c];
        }
      }
      let from = this.xAddr;
      let width = this.inputs;
      let which = 0;
      for (const step of this.steps) {
        if (step.kind === 'dense') {
          const to = this.bufAddr[which];
          this.kernel.dense(from, step.w, step.b, to, n, step.nIn, step.outP, step.relu ? 1 : 0);
          if (!step.relu && step.activation !== 'linear') activate(mem, to / 4, n, step.outP, step.out, step.activation, step.alpha);
          from = to;
          width = step.outP;
          which ^= 1;
        } else {
          const base = from / 4;
          for (let r = 0; r < n; r++) {
            const o = base + r * width;
            for (let c = 0; c < step.scale.length; c++) mem[o + c] = mem[o + c] * step.scale[c] + step.shift[c];
          }
        }
      }
      const base = from / 4;
      for (let r = 0; r < n; r++) out.set(mem.subarray(base + r * width, base + r * width + this.outputs), (start + r) * this.outputs);
    }
    return out;
  }

  /**
   * Each layer's output for raw features, for the parity report: layer i's output is the
   * output of the model cut after layer i, run on this same kernel.
   */
  runLayers(data: Float32Array, rows: number): Float32Array[] {
    return this.doc.layers.map((_, i) => {
      if (i === this.doc.layers.length - 1) return this.run(data, rows);
      const prefix: ModelDoc = { ...this.doc, layers: this.doc.layers.slice(0, i + 1), labels: null };
      return new SimdRunner(prefix, { chunkRows: this.chunkRows, kernel: this.kernelOptions }).run(data, rows);
    });
  }

  /**
   * Mark the runner finished. The kernel's memory goes with the runner object; refusing later
   * calls keeps the contract the same as TfjsRunner's (use after dispose is a bug to surface).
   */
  dispose(): void {
    this.disposed = true;
  }
}

/** Activations other than ReLU and linear, on the real columns of each row, in float32. */
function activate(mem: Float32Array, base: number, rows: number, stride: number, cols: number, activation: ActivationName, alpha: number): void {
  for (let r = 0; r < rows; r++) {
    const o = base + r * stride;
    if (activation === 'softmax') {
      // Subtract the row maximum first so exp never overflows (common practice).
      let max = -Infinity;
      for (let c = 0; c < cols; c++) max = Math.max(max, mem[o + c]);
      let sum = 0;
      for (let c = 0; c < cols; c++) {
        const e = Math.exp(mem[o + c] - max);
        mem[o + c] = e;
        sum += e;
      }
      for (let c = 0; c < cols; c++) mem[o + c] /= sum;
      continue;
    }
    for (let c = 0; c < cols; c++) {
      const z = mem[o + c];
      switch (activation) {
        case 'leaky_relu':
          mem[o + c] = z < 0 ? alpha * z : z;
          break;
        case 'sigmoid':
          // Two forms so exp only sees non-positive arguments.
          mem[o + c] = z >= 0 ? 1 / (1 + Math.exp(-z)) : Math.exp(z) / (1 + Math.exp(z));
          break;
        case 'tanh':
          mem[o + c] = Math.tanh(z);
          break;
        case 'softplus':
          mem[o + c] = Math.max(z, 0) + Math.log1p(Math.exp(-Math.abs(z)));
          break;
        default:
          break;
      }
    }
  }
}
