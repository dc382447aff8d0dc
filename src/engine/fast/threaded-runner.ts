/**
 * The `fast` engine on every core: the same float32 kernel as `SimdRunner`, compiled over one
 * shared memory (`SharedMemoryRunner` with float32 arithmetic) so each call's rows are split
 * between the caller and helper threads without copying them. `openRunner` picks it for the fast
 * engine when more than one thread is asked for (`tendon score` asks for every core).
 */
import type { ModelDoc } from '../../model/index.js';
import type { Runner } from '../runner.js';
import { SharedMemoryEngine } from '../shared-memory-engine.js';
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
export class ThreadedFastRunner extends SharedMemoryEngine {
  readonly engine = 'fast' as const;

  constructor(
    doc: ModelDoc,
    private readonly opts: ThreadedFastRunnerOptions,
  ) {
    // Refuse what the single-thread fast engine refuses, naming the layer, before compiling anything.
    simdInferencePlan(doc);
    super(doc, { arith: 'f32', threads: opts.threads, chunkRows: opts.chunkRows, source: opts.source });
  }

  protected openOneThread(prefix: ModelDoc): Runner {
    return new ThreadedFastRunner(prefix, { ...this.opts, threads: 1 });
  }
}
