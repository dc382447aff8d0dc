/**
 * Messages between the serving pool (src/serve/pool.ts) and its worker threads
 * (worker-entry.ts). Arrays travel as whole ArrayBuffers so they can be transferred, not copied.
 */

/** A tfjs engine ('auto' = wasm, else js), or 'fast': our own WebAssembly SIMD kernel (src/engine/fast). */
export type WorkerEngine = 'js' | 'wasm' | 'auto' | 'fast' | 'int8';

/** What a worker is started with (its workerData). */
export interface WorkerSetup {
  /** The model file bytes, as from encodeModel(doc) or the file itself. */
  readonly model: Uint8Array;
  /** Names the model in errors. */
  readonly source: string;
  readonly engine: WorkerEngine;
  /** Test hook: the worker exits on every run message (a worker that always dies). */
  readonly crashEveryRun: boolean;
}

export type ToWorker =
  | { readonly kind: 'run'; readonly id: number; readonly rows: number; readonly data: ArrayBuffer }
  /** Test hook: exit on the next run message, as a crash mid-call would. */
  | { readonly kind: 'crash-next-run' };

export type FromWorker =
  | { readonly kind: 'ready'; readonly engine: 'js' | 'wasm' | 'fast' | 'int8'; readonly inputs: number; readonly outputs: number }
  | { readonly kind: 'open-failed'; readonly message: string; readonly typed: boolean }
  | { readonly kind: 'done'; readonly id: number; readonly data: ArrayBuffer }
  | { readonly kind: 'failed'; readonly id: number; readonly message: string; readonly typed: boolean };

export function isWorkerSetup(value: unknown): value is WorkerSetup {
  if (typeof value !== 'object' || value === null) return false;
  const v = value as Partial<Record<keyof WorkerSetup, unknown>>;
  return (
    v.model instanceof Uint8Array &&
    typeof v.source === 'string' &&
    (v.engine === 'js' || v.engine === 'wasm' || v.engine === 'auto' || v.engine === 'fast' || v.engine === 'int8') &&
    typeof v.crashEveryRun === 'boolean'
  );
}
