/**
 * Inference in integer arithmetic: int8 weights (the codes an i8 file stores), activations
 * quantised onto the ranges the model stores (`shrink --calibrate`, clamping values outside) or,
 * without them, per row on the fly, 32-bit integer sums, dequantise + bias + ReLU fused at the store
 * (see kernels.ts for the arithmetic and its overflow bound). The same surface as SimdRunner,
 * plus which kernel runs and on how many threads.
 *
 * Per row, not per batch: a per-batch activation range would make a row's answer depend on the
 * other rows it was batched with (a service would answer the same row differently under load).
 * Stored ranges are fixed per layer, so they keep that promise too.
 */
import type { ModelDoc } from '../../model/index.js';
import { outputsOfPrefixes } from '../prefix-outputs.js';
import type { Runner } from '../runner.js';
import { SharedMemoryRunner } from '../shared-memory-runner.js';
import { bestInt8Arith, INT8_KERNEL_NAMES, type Int8Arith } from './kernels.js';

export interface Int8RunnerOptions {
  /** Threads, the caller included. Default 1. */
  readonly threads?: number;
  /** Rows per pass; default 256 per thread. */
  readonly chunkRows?: number;
  /** Names the model in errors. */
  readonly source?: string;
  /** Force an arithmetic (tests and benchmarks); default the best this runtime validates. */
  readonly arith?: Int8Arith;
}

/**
 * @example
 * const s = new Int8Runner(doc, { threads: 2 });
 * await s.ready();
 * const y = s.run(features, rows); // Float32Array rows x outputs
 * s.kernel // "relaxed i8 dot, i16x8.relaxed_dot_i8x16_i7x16_s"
 * @throws ModelFileError when the document is not usable or a layer is too wide for 32-bit sums;
 *   Error when this runtime has no WebAssembly SIMD.
 */
export class Int8Runner implements Runner {
  readonly engine = 'int8' as const;
  readonly inputs: number;
  readonly outputs: number;
  readonly arith: Int8Arith;
  private readonly shared: SharedMemoryRunner;
  private readonly options: Int8RunnerOptions;

  constructor(
    readonly doc: ModelDoc,
    opts: Int8RunnerOptions = {},
  ) {
    const arith = opts.arith ?? bestInt8Arith();
    if (arith === null) throw new Error('the int8 engine needs WebAssembly SIMD, which this runtime lacks');
    this.arith = arith;
    this.options = opts;
    this.shared = new SharedMemoryRunner(doc, { arith, threads: opts.threads, chunkRows: opts.chunkRows, source: opts.source });
    this.inputs = this.shared.inputs;
    this.outputs = this.shared.outputs;
  }

  /** Which kernel runs, in words. */
  get kernel(): string {
    return INT8_KERNEL_NAMES[this.arith];
  }

  /** How each dense layer's input is quantised: onto the ranges the model stores, or onto each row's own. */
  get activationRanges(): 'stored' | 'per row' {
    return this.doc.activationRanges ? 'stored' : 'per row';
  }

  /** Whether the weights are the file's own int8 codes for every dense layer. */
  get storedCodes(): boolean {
    return this.shared.codes.every((c) => c === 'stored');
  }

  get threads(): number {
    return this.shared.threads;
  }

  get chunkRows(): number {
    return this.shared.chunkRows;
  }

  /** Resolves once the helper threads have started. */
  ready(): Promise<void> {
    return this.shared.ready();
  }

  /**
   * Inference on raw features (rows x inputs, row-major); returns a new rows x outputs array.
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array {
    return this.shared.run(data, rows);
  }

  /** Each layer's output, from the model cut after that layer, for the parity report. */
  runLayers(data: Float32Array, rows: number): Float32Array[] {
    const open = (prefix: ModelDoc) => new Int8Runner(prefix, { ...this.options, threads: 1 });
    return outputsOfPrefixes(this.doc, () => this.run(data, rows), open, data, rows);
  }

  dispose(): void {
    this.shared.dispose();
  }
}
