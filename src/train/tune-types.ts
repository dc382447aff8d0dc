/**
 * The tune run's public contract: the options beyond TuneOptions, the hooks, what each epoch
 * records and what a run returns, and the divergence error that carries the last good weights.
 * Kept apart so the loop file holds the algorithm only.
 */
import { DivergenceError } from '../errors.js';
import type { ModelDoc } from '../model/index.js';
import type { TrainPath } from './backends.js';
import type { TuneOptions } from './config.js';
import type { Diagnostic } from './diagnostics.js';
import type { LossSpec } from './losses.js';
import type { SplitMetrics } from './split-eval.js';

export interface EpochRecord {
  /** 0-based. */
  readonly epoch: number;
  /** Mean loss of the epoch's batches as trained (dropout on, before each step). */
  readonly batchLoss: number;
  /** Mean anchor penalty over the epoch's batches (0 without anchor). */
  readonly anchorPenalty: number;
  /** The training rows evaluated in inference mode after the epoch. */
  readonly train: SplitMetrics;
  readonly holdout: SplitMetrics | null;
  /** Per layer with parameters: mean over batches of the L2 norm of its gradients. */
  readonly gradientNorms: Record<number, number>;
  /** Per ReLU layer: share of units that never fired on the epoch's rows. */
  readonly deadRelu: Record<number, number>;
  /** Learning rate of the epoch's last update. */
  readonly lr: number;
  readonly updates: number;
  readonly rowsPerSecond: number;
  readonly diagnostics: Diagnostic[];
}

export interface BatchProgress {
  readonly epoch: number;
  /** 0-based batch within the epoch. */
  readonly batch: number;
  readonly batches: number;
  readonly loss: number;
  readonly rows: number;
}

export interface TuneHooks {
  onBatch?(p: BatchProgress): void;
  onEpoch?(r: EpochRecord): void;
  /** Stops the run after the current batch; the result says `aborted`. */
  signal?: AbortSignal;
}

export interface TuneRunOptions extends TuneOptions {
  /**
   * Where the steps run: 'fast' (own WebAssembly SIMD kernel), 'engine' (tfjs) or 'reference'
   * (float64). Default: 'fast' when the runtime has WebAssembly SIMD and the model has only
   * dense and dropout layers, else 'engine'. An explicit 'fast' that cannot run falls back to
   * 'engine' with an 'engine_fallback' diagnostic.
   */
  path?: TrainPath;
  /** The parent file, for provenance ("fine-tuned from SOURCE"). */
  parent?: { checksum: string; source: string };
  /**
   * Without a parent file: where the starting weights came from, in words, for provenance
   * ("trained from ORIGIN", e.g. "spec bakery-spec.json"); default "a model held in memory".
   */
  origin?: string;
}

export interface TuneResult {
  /** A new document; the input is never changed. */
  readonly doc: ModelDoc;
  readonly history: EpochRecord[];
  /** Run-level diagnostics, then each per-epoch diagnostic the first time it appears. */
  readonly diagnostics: Diagnostic[];
  readonly stoppedEarly: boolean;
  /** Epoch whose weights the document holds (best hold-out loss under early stopping, else the last). */
  readonly bestEpoch: number;
  /** The signal stopped the run; `doc` holds the weights after the last complete batch. */
  readonly aborted: boolean;
  readonly loss: LossSpec;
  /** Where the steps actually ran (after any fallback). */
  readonly path: TrainPath;
}

/**
 * Divergence with the document as it was before the step that went bad, so a caller can keep it.
 * Still a DivergenceError (exit code 1, the same message).
 */
export class TuneDivergence extends DivergenceError {
  constructor(
    epoch: number,
    batch: number,
    layer: string,
    detail: string,
    /** A copy of the last weights whose loss and gradients were finite. */
    readonly lastGood: ModelDoc,
  ) {
    super(epoch, batch, layer, detail);
  }
}
