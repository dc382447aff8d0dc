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
import { activationKind, inputShiftScale, modelWidths, validateModel, type ActivationF32, type ModelDoc, type SimdInference } from '../../model/index.js';
import { outputsOfPrefixes } from '../prefix-outputs.js';
import type { Runner } from '../runner.js';
import { instantiateDenseKernel, padded, type DenseKernel, type KernelOptions } from './dense-kernel.js';
import { simdInferencePlan } from './simd-plan.js';

type Step =
  | {
      readonly op: 'dense';
      readonly w: number;
      readonly b: number;
      readonly nIn: number;
      readonly out: number;
      readonly outP: number;
      readonly activation: ActivationF32;
      readonly alpha: number;
    }
  | { readonly op: 'affine'; readonly scale: Float32Array; readonly shift: Float32Array };

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
 * @throws ModelFileError when the document is not usable; EngineRefusal when a layer has no
 *   fast-kernel form; Error when WebAssembly SIMD is missing.
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
    const plan: { op: SimdInference; width: number; wAt: number; bAt: number }[] = [];
    let width = this.inputs; // floats per row of the current activation
    let maxWidth = 0;
    for (const op of simdInferencePlan(doc)) {
      if (op.op === 'dense') {
        const outP = padded(op.size);
        plan.push({ op, width, wAt: bytes, bAt: bytes + width * outP * 4 });
        bytes += (width * outP + outP) * 4;
        width = outP;
        maxWidth = Math.max(maxWidth, outP);
      } else {
        plan.push({ op, width, wAt: -1, bAt: -1 });
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
    plan.forEach(({ op, width: inWidth, wAt, bAt }, i) => {
      switch (op.op) {
        case 'dense': {
          const outP = padded(op.size);
          const realIn = realWidths[i];
          // W rows beyond the real inputs (padding of the previous layer) stay zero.
          for (let k = 0; k < realIn; k++) mem.set(op.weight.subarray(k * op.size, (k + 1) * op.size), wAt / 4 + k * outP);
          mem.set(op.bias, bAt / 4);
          this.steps.push({ op: 'dense', w: wAt, b: bAt, nIn: inWidth, out: op.size, outP, activation: activationKind(op.activation).f32, alpha: op.alpha });
          break;
        }
        case 'affine':
          // Folded in float64 by the layer kind, rounded to float32 once here.
          this.steps.push({ op: 'affine', scale: Float32Array.from(op.scale), shift: Float32Array.from(op.shift) });
          break;
        case 'identity':
          break;
        default:
          throw new Error(`SimdRunner: unknown kernel operation ${String(op satisfies never)}`);
      }
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
        if (step.op === 'dense') {
          const to = this.bufAddr[which];
          const fused = step.activation.fusedInKernel === 'relu';
          this.kernel.dense(from, step.w, step.b, to, n, step.nIn, step.outP, fused ? 1 : 0);
          if (!fused) step.activation.forward(mem, to / 4, n, step.outP, step.out, step.alpha);
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
    const open = (prefix: ModelDoc) => new SimdRunner(prefix, { chunkRows: this.chunkRows, kernel: this.kernelOptions });
    return outputsOfPrefixes(this.doc, () => this.run(data, rows), open, data, rows);
  }

  /**
   * Mark the runner finished. The kernel's memory goes with the runner object; refusing later
   * calls keeps the contract the same as TfjsRunner's (use after dispose is a bug to surface).
   */
  dispose(): void {
    this.disposed = true;
  }
}
