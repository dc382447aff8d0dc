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
import type { Runner } from '../runner.js';
import { SharedMemoryEngine } from '../shared-memory-engine.js';
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
export class Int8Runner extends SharedMemoryEngine {
  readonly engine = 'int8' as const;
  readonly arith: Int8Arith;

  constructor(
    doc: ModelDoc,
    private readonly options: Int8RunnerOptions = {},
  ) {
    const arith = options.arith ?? bestInt8Arith();
    if (arith === null) throw new Error('the int8 engine needs WebAssembly SIMD, which this runtime lacks');
    super(doc, { arith, threads: options.threads, chunkRows: options.chunkRows, source: options.source });
    this.arith = arith;
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

  protected openOneThread(prefix: ModelDoc): Runner {
    return new Int8Runner(prefix, { ...this.options, threads: 1 });
  }
}
