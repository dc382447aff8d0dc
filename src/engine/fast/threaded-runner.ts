/**
 * The `fast` engine on every core: the same float32 kernel as `SimdRunner`, compiled over one
 * shared memory (`SharedMemoryRunner` with float32 arithmetic) so each call's rows are split
 * between the caller and helper threads without copying them. `openRunner` picks it for the fast
 * engine when more than one thread is asked for (`tendon score` asks for every core).
 */
import type { ModelDoc } from '../../model/index.js';
import { outputsOfPrefixes } from '../prefix-outputs.js';
import type { Runner } from '../runner.js';
import { SharedMemoryRunner } from '../shared-memory-runner.js';
import { simdInferencePlan } from './simd-plan.js';

export interface ThreadedFastRunnerOptions {
  /** Threads, the caller included. */
  readonly threads: number;
  /** Rows per pass; default 256 per thread. */
  readonly chunkRows?: number;
  /** Names the model in errors. */
  readonly source?: string;
}

/**
 * @example
 * const r = new ThreadedFastRunner(doc, { threads: 2 }); // or openRunner(doc, 'fast', { threads: 2 })
 * const y = r.run(features, rows); // Float32Array rows x outputs
 * @throws ModelFileError when the document is not usable; EngineRefusal when a layer has no
 *   fast-kernel form (the same refusals as SimdRunner).
 */
export class ThreadedFastRunner implements Runner {
  readonly engine = 'fast' as const;
  readonly inputs: number;
  readonly outputs: number;
  private readonly shared: SharedMemoryRunner;

  constructor(
    readonly doc: ModelDoc,
    private readonly opts: ThreadedFastRunnerOptions,
  ) {
    // Refuse what the single-thread fast engine refuses, naming the layer, before compiling anything.
    simdInferencePlan(doc);
    this.shared = new SharedMemoryRunner(doc, { arith: 'f32', threads: opts.threads, chunkRows: opts.chunkRows, source: opts.source });
    this.inputs = this.shared.inputs;
    this.outputs = this.shared.outputs;
  }

  get threads(): number {
    return this.shared.threads;
  }

  get chunkRows(): number {
    return this.shared.chunkRows;
  }

  /** Resolves once the helper threads have started (until then the caller runs every row). */
  ready(): Promise<void> {
    return this.shared.ready();
  }

  run(data: Float32Array, rows: number): Float32Array {
    return this.shared.run(data, rows);
  }

  /** Each layer's output, from the model cut after that layer (one thread), for the parity report. */
  runLayers(data: Float32Array, rows: number): Float32Array[] {
    const open = (prefix: ModelDoc) => new SharedMemoryRunner(prefix, { arith: 'f32', threads: 1, chunkRows: this.opts.chunkRows, source: this.opts.source });
    return outputsOfPrefixes(this.doc, () => this.run(data, rows), open, data, rows);
  }

  dispose(): void {
    this.shared.dispose();
  }
}
