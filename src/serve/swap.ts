/**
 * Hot model swap: one slot holds the model being served. A reload reads and fully checks the
 * new file, makes sure it takes and gives the same widths, then swaps it in. Batches already
 * running keep the model they started with (they hold a lease); the old model is disposed
 * when its last lease ends. A bad file is refused and the old model keeps serving.
 */
import { watch, type FSWatcher } from 'node:fs';
import { basename, dirname, resolve } from 'node:path';
import { TendonError } from '../errors.js';
import { openModel, type TendonModel } from '../tendon.js';

/** A model and the number of batches still using it. */
export interface ModelLease {
  readonly model: TendonModel;
  /** 1 for the first model, +1 per swap. */
  readonly generation: number;
}

interface Entry extends ModelLease {
  leases: number;
  retired: boolean;
  /** Whether the slot owns (and so disposes) the model. */
  readonly owned: boolean;
}

export type SwapOutcome =
  { readonly swapped: true; readonly checksum: string | null; readonly generation: number } | { readonly swapped: false; readonly reason: string };

export interface ModelSlotOptions {
  /** One line per swap or refusal; default: stderr. */
  readonly log?: (line: string) => void;
  /** Called after each swap with the new model (counters, drift baselines). */
  readonly onSwap?: (model: TendonModel) => void;
  /** Called after each swap or refusal (not for an unchanged file). */
  readonly onOutcome?: (outcome: SwapOutcome) => void;
  /**
   * Runs on a checked new model before it is swapped in (e.g. start workers holding it); a
   * rejection refuses the swap, with its message as the reason, and the old model keeps serving.
   */
  readonly prepare?: (model: TendonModel) => Promise<void>;
  /**
   * Called once per model when it has left the slot for good: swapped out and its last leased
   * batch done, refused after prepare, or at close. Called whether or not the slot owns it.
   */
  readonly onRetired?: (model: TendonModel) => void;
}

/**
 * The model being served, swappable between batches.
 * @example
 * const slot = new ModelSlot(await openModel('bakery.tendon'), 'bakery.tendon');
 * const lease = slot.acquire(); try { lease.model.run(rows) } finally { slot.release(lease) }
 * await slot.reload(); // { swapped: true, ... } or { swapped: false, reason }
 */
export class ModelSlot {
  private entry: Entry;
  private readonly entries = new Set<Entry>();
  private pending: Promise<SwapOutcome> = Promise.resolve({ swapped: false, reason: 'no reload yet' });
  private watcher: FSWatcher | null = null;
  private debounce: ReturnType<typeof setTimeout> | null = null;
  private closed = false;
  private readonly log: (line: string) => void;

  constructor(
    model: TendonModel,
    /** The file a reload reads; null for a model made in memory (reload then needs a path). */
    readonly path: string | null,
    private readonly options: ModelSlotOptions = {},
    /** Whether the slot disposes the first model when it is swapped out or closed. */
    ownsFirst = true,
  ) {
    this.entry = { model, generation: 1, leases: 0, retired: false, owned: ownsFirst };
    this.entries.add(this.entry);
    this.log = options.log ?? ((line) => void process.stderr.write(line + '\n'));
  }

  get current(): TendonModel {
    return this.entry.model;
  }

  get generation(): number {
    return this.entry.generation;
  }

  /** Take the current model for one batch; pair with release(). */
  acquire(): ModelLease {
    this.entry.leases++;
    return this.entry;
  }

  release(lease: ModelLease): void {
    const entry = [...this.entries].find((e) => e === lease);
    if (!entry) return;
    entry.leases--;
    this.disposeIfDone(entry);
  }

  /**
   * Read `path` (default: the slot's file), check it, and swap it in. Reloads run one at a time.
   * Never throws: a refusal is logged as one line and returned with its reason.
   */
  reload(path?: string): Promise<SwapOutcome> {
    const next = this.pending.then(() => this.load(path ?? this.path));
    this.pending = next;
    return next;
  }

  private async load(path: string | null): Promise<SwapOutcome> {
    const refuse = (reason: string): SwapOutcome => {
      this.log(`tendon serve: kept the current model; refused ${path ?? '(no path)'}: ${reason}`);
      const outcome: SwapOutcome = { swapped: false, reason };
      this.options.onOutcome?.(outcome);
      return outcome;
    };
    if (this.closed) return { swapped: false, reason: 'the slot is closed' };
    if (!path) return refuse('no model file to reload from');
    let model: TendonModel;
    try {
      model = await openModel(path, { chunkRows: this.entry.model.runner.chunkRows });
    } catch (error) {
      return refuse(error instanceof TendonError ? error.message : `cannot load: ${error instanceof Error ? error.message : String(error)}`);
    }
    const old = this.entry.model;
    if (model.inputs !== old.inputs || model.outputs !== old.outputs) {
      model.dispose();
      return refuse(`it takes ${model.inputs} inputs and gives ${model.outputs} outputs; the model being served takes ${old.inputs} and gives ${old.outputs}`);
    }
    if (this.closed) {
      model.dispose();
      return { swapped: false, reason: 'the slot is closed' };
    }
    if (model.checksum !== null && model.checksum === old.checksum) {
      model.dispose();
      return { swapped: false, reason: 'unchanged (same checksum)' };
    }
    if (this.options.prepare) {
      try {
        await this.options.prepare(model);
      } catch (error) {
        model.dispose();
        return refuse(`could not prepare it: ${error instanceof Error ? error.message : String(error)}`);
      }
      if (this.closed) {
        model.dispose();
        this.options.onRetired?.(model);
        return { swapped: false, reason: 'the slot is closed' };
      }
    }
    const retired = this.entry;
    this.entry = { model, generation: retired.generation + 1, leases: 0, retired: false, owned: true };
    this.entries.add(this.entry);
    retired.retired = true;
    this.disposeIfDone(retired);
    this.log(`tendon serve: swapped in ${path} (checksum ${model.checksum}, generation ${this.entry.generation})`);
    this.options.onSwap?.(model);
    const outcome: SwapOutcome = { swapped: true, checksum: model.checksum, generation: this.entry.generation };
    this.options.onOutcome?.(outcome);
    return outcome;
  }

  /**
   * Reload when the file changes. Watches the directory, since an atomic write renames a new
   * file over the old one and a watch on the old file would go quiet after the first swap.
   * Editors and copies write in several steps, so changes settle for `debounceMs` first.
   */
  watch(debounceMs = 150): void {
    if (!this.path || this.watcher) return;
    const target = basename(this.path);
    const dir = dirname(resolve(this.path));
    this.watcher = watch(dir, { persistent: false }, (_event, name) => {
      if (name !== null && name.toString() !== target) return;
      if (this.debounce) clearTimeout(this.debounce);
      this.debounce = setTimeout(() => {
        this.debounce = null;
        void this.reload();
      }, debounceMs);
    });
    this.watcher.on('error', (error) => this.log(`tendon serve: stopped watching ${this.path}: ${error.message}`));
  }

  /** Stop watching, wait for a reload under way, and dispose every owned model once its batches end. */
  async close(): Promise<void> {
    this.closed = true;
    this.watcher?.close();
    this.watcher = null;
    if (this.debounce) clearTimeout(this.debounce);
    await this.pending;
    this.entry.retired = true;
    for (const e of [...this.entries]) this.disposeIfDone(e);
  }

  private disposeIfDone(entry: Entry): void {
    if (!entry.retired || entry.leases > 0 || !this.entries.has(entry)) return;
    this.entries.delete(entry);
    if (entry.owned) entry.model.dispose();
    this.options.onRetired?.(entry.model);
  }
}
