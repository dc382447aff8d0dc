/**
 * The one contract for a model resident on an engine, and the one function that opens it.
 *
 * A `Runner` takes raw feature rows and gives outputs; every engine implements it:
 * - `TfjsRunner` (tfjs-runner.ts): the tfjs `js` and `wasm` backends;
 * - `SimdRunner` (fast/simd-runner.ts): our own WebAssembly SIMD kernel, engine `fast`;
 * - `Int8Runner` (int8/int8-runner.ts): integer arithmetic on int8 weights, engine `int8`.
 * Training is a separate concern with its own classes (`TfjsTrainer`, `SimdTrainer`).
 *
 * The façade (src/tendon.ts), parity (src/check), the benchmarks (src/bench) and the worker
 * pool (worker-entry.ts) all open runners through `openRunner`.
 */
import { runningForm, type ModelDoc } from '../model/index.js';
import type { RuntimeEngine } from './choice.js';
import { SimdRunner } from './fast/simd-runner.js';
import { ThreadedFastRunner } from './fast/threaded-runner.js';
import type { KernelOptions } from './fast/dense-kernel.js';
import { TfjsRunner } from './tfjs-runner.js';
import { Int8Runner } from './int8/int8-runner.js';

export interface Runner {
  /** What runs the model: 'js' or 'wasm' (tfjs), 'fast' (our own kernel). */
  readonly engine: RuntimeEngine;
  /** Features per input row. */
  readonly inputs: number;
  /** Values per output row. */
  readonly outputs: number;
  /** Most rows the engine takes in one pass; bounds peak memory. */
  readonly chunkRows: number;
  /**
   * Inference on raw features (rows x inputs, row-major; the model's normalisation is applied
   * inside); returns a new rows x outputs array owned by the caller.
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array;
  /** Each layer's output (rows x width per layer) for raw features, for the parity report. */
  runLayers(data: Float32Array, rows: number): Float32Array[];
  /** Free what the runner holds; later calls throw. */
  dispose(): void;
}

export interface RunnerOptions {
  /** Most rows sent through the engine at once; bounds peak memory. */
  readonly chunkRows?: number;
  /** Names the model in validation errors. */
  readonly source?: string;
  /** Kernel choices for the fast engine (tests and benchmarks compare the fused and plain multiply-add). */
  readonly kernel?: KernelOptions;
  /** Threads sharing the rows of a call (int8 and fast engines; default 1). */
  readonly threads?: number;
}

/**
 * Make `doc` resident on an engine settled beforehand (`resolveEngine` or `useEngine`, which
 * switch the process's tfjs backend; tfjs has one per process).
 * @example
 * const { engine } = await resolveEngine('auto');
 * const runner = openRunner(doc, engine);
 * const y = runner.run(features, rows);
 * runner.dispose();
 * @throws ModelFileError when the document is not usable; EngineRefusal when the engine cannot
 *   run one of its layers; Error when a tfjs engine is asked for while the process runs the other.
 */
export function openRunner(stored: ModelDoc, engine: RuntimeEngine, opts: RunnerOptions = {}): Runner {
  // A stored calibration temperature or target scaling is folded into the output layer here,
  // once, so no engine needs code for it (model/running-form.ts); the reference forward does the same.
  const doc = runningForm(stored);
  switch (engine) {
    case 'fast':
      // More than one thread: the same float32 kernel over shared memory, rows split across cores.
      return (opts.threads ?? 1) > 1
        ? new ThreadedFastRunner(doc, { threads: opts.threads!, chunkRows: opts.chunkRows, source: opts.source })
        : new SimdRunner(doc, opts);
    case 'int8':
      return new Int8Runner(doc, { chunkRows: opts.chunkRows, source: opts.source, threads: opts.threads });
    case 'js':
    case 'wasm': {
      const runner = new TfjsRunner(doc, opts);
      if (runner.engine !== engine) {
        runner.dispose();
        throw new Error(`openRunner: asked for the ${engine} engine, but the process runs tfjs on ${runner.engine}; call useEngine('${engine}') first`);
      }
      return runner;
    }
    default:
      throw new Error(`openRunner: unknown engine ${String(engine satisfies never)}`);
  }
}
