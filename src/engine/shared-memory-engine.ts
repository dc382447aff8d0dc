/**
 * What the engines built on `SharedMemoryRunner` (float32 on threads, int8) share: the runner
 * surface delegated to the compiled model, and per-layer outputs from the model cut after each
 * layer on one thread. An engine adds only how it opens the model and what it reports.
 */
import type { ModelDoc } from '../model/index.js';
import { outputsOfPrefixes } from './prefix-outputs.js';
import type { Runner } from './runner.js';
import { SharedMemoryRunner, type SharedMemoryRunnerOptions } from './shared-memory-runner.js';
import type { RuntimeEngine } from './choice.js';

export abstract class SharedMemoryEngine implements Runner {
  abstract readonly engine: RuntimeEngine;
  readonly inputs: number;
  readonly outputs: number;
  protected readonly shared: SharedMemoryRunner;

  constructor(
    readonly doc: ModelDoc,
    opts: SharedMemoryRunnerOptions,
  ) {
    this.shared = new SharedMemoryRunner(doc, opts);
    this.inputs = this.shared.inputs;
    this.outputs = this.shared.outputs;
  }

  /** The same engine on one thread over `prefix` (a model cut after some layer). */
  protected abstract openOneThread(prefix: ModelDoc): Runner;

  /** Threads taking rows right now, the caller included. */
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

  /**
   * Inference on raw features (rows x inputs, row-major); returns a new rows x outputs array.
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array {
    return this.shared.run(data, rows);
  }

  /** Each layer's output, from the model cut after that layer (one thread), for the parity report. */
  runLayers(data: Float32Array, rows: number): Float32Array[] {
    return outputsOfPrefixes(
      this.doc,
      () => this.run(data, rows),
      (prefix) => this.openOneThread(prefix),
      data,
      rows,
    );
  }

  dispose(): void {
    this.shared.dispose();
  }
}
