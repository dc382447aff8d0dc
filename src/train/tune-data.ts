/**
 * The rows a run reads: target checks against the model's output width, the hold-out split,
 * and the reusable batch buffer that gathers each batch's rows with its replay rows mixed in.
 * Kept apart from the loop so the loop deals in batches, never in row offsets.
 */
import { DataError, TuneConfigError } from '../errors.js';
import type { SeededRng } from '../model/index.js';
import type { ResolvedTuneOptions, TuneData } from './config.js';
import type { Targets } from './losses.js';
import { shuffledOrder, splitHoldout } from './shuffle.js';

/** Targets checked against the model's output width; classes when y is an Int32Array. */
export function checkTargets(data: TuneData, outputs: number, name: string): void {
  if (data.y instanceof Int32Array) {
    if (data.y.length !== data.rows) throw new TuneConfigError(`${name}.y`, `has ${data.y.length} class indices, expected one per row (${data.rows})`);
    const classes = outputs === 1 ? 2 : outputs;
    for (let r = 0; r < data.rows; r++) {
      const c = data.y[r];
      if (c < 0 || c >= classes) throw new DataError(`(${name})`, r + 1, 0, `class ${c} is not one the model knows (0..${classes - 1})`);
    }
  } else if (data.y.length !== data.rows * outputs) {
    throw new TuneConfigError(`${name}.y`, `has ${data.y.length} values, expected rows x outputs = ${data.rows} x ${outputs}`);
  }
}

function subset(data: TuneData, rows: Int32Array, inputs: number, outputs: number): TuneData {
  const x = new Float32Array(rows.length * inputs);
  const classes = data.y instanceof Int32Array;
  const y = classes ? new Int32Array(rows.length) : new Float32Array(rows.length * outputs);
  rows.forEach((r, i) => {
    x.set(data.x.subarray(r * inputs, (r + 1) * inputs), i * inputs);
    if (classes) y[i] = data.y[r];
    else y.set(data.y.subarray(r * outputs, (r + 1) * outputs), i * outputs);
  });
  return { x, rows: rows.length, y };
}

function asFloat32(data: TuneData): TuneData {
  return data.x instanceof Float32Array ? data : { ...data, x: Float32Array.from(data.x) };
}

/** The targets of rows from..to (exclusive) of `y`. */
export function targetsOf(y: TuneData['y'], from: number, to: number, outputs: number): Targets {
  return y instanceof Int32Array ? { kind: 'classes', classes: y.subarray(from, to) } : { kind: 'values', values: y.subarray(from * outputs, to * outputs) };
}

export interface RunRows {
  readonly train: TuneData;
  readonly held: TuneData | null;
  readonly replay: TuneData | null;
}

/**
 * The training, hold-out and replay rows of a run, checked and as float32: the hold-out is a
 * seeded split of `data` (drawn from `splitRng`) or separate rows, per the options.
 *
 * @throws TuneConfigError for targets of the wrong length or kind, DataError for an unknown class.
 */
export function runRows(data: TuneData, opts: ResolvedTuneOptions, inputs: number, outputs: number, splitRng: SeededRng): RunRows {
  checkTargets(data, outputs, 'data');
  let train = asFloat32(data);
  let held: TuneData | null = null;
  if (opts.holdout.kind === 'fraction') {
    if (data.rows < 2) throw new TuneConfigError('holdout', `needs at least 2 rows, got ${data.rows}`);
    const split = splitHoldout(data.rows, opts.holdout.fraction, splitRng);
    train = subset(data, split.train, inputs, outputs);
    held = subset(data, split.holdout, inputs, outputs);
  } else if (opts.holdout.kind === 'data') {
    checkTargets(opts.holdout.data, outputs, 'holdoutData');
    held = asFloat32(opts.holdout.data);
  }
  const replay = opts.replay ? asFloat32(opts.replay.data) : null;
  if (replay) checkTargets(replay, outputs, 'replay');
  if (replay && replay.y instanceof Int32Array !== data.y instanceof Int32Array) {
    throw new TuneConfigError('replay', 'targets must be of the same kind as the training data (class indices or values)');
  }
  return { train, held, replay };
}

/** Replay rows added to a batch of `batchRows`: a count, or a share of the batch (at least one). */
function replayRowsFor(perBatch: number, batchRows: number): number {
  return perBatch >= 1 ? perBatch : Math.max(1, Math.round(perBatch * batchRows));
}

export interface Batch {
  readonly x: Float32Array;
  readonly rows: number;
  readonly targets: Targets;
}

/**
 * One buffer, sized for the largest batch, that each batch's rows are copied into, followed by
 * its replay rows. Replay rows come from a seeded shuffle of the earlier data, cycled across
 * epochs, so a run draws the same replay rows from the same seed.
 *
 * @example const gather = new BatchGatherer(4, 3, 32, true, null); const b = gather.next(train, idx);
 */
export class BatchGatherer {
  private readonly x: Float32Array;
  private readonly classes: Int32Array;
  private readonly values: Float32Array;
  private replayOrder: Int32Array | null = null;
  private replayAt = 0;

  constructor(
    private readonly inputs: number,
    private readonly outputs: number,
    batch: number,
    private readonly classifier: boolean,
    private readonly replay: { readonly rows: TuneData; readonly perBatch: number; readonly rng: SeededRng } | null,
  ) {
    const maxRows = batch + (replay ? replayRowsFor(replay.perBatch, batch) : 0);
    this.x = new Float32Array(maxRows * inputs);
    this.classes = new Int32Array(maxRows);
    this.values = new Float32Array(maxRows * outputs);
  }

  /** The rows `indices` of `train`, then the replay rows; valid until the next call. */
  next(train: TuneData, indices: Int32Array): Batch {
    const { inputs, outputs } = this;
    let n = 0;
    const put = (src: TuneData, r: number) => {
      this.x.set(src.x.subarray(r * inputs, (r + 1) * inputs), n * inputs);
      if (src.y instanceof Int32Array) this.classes[n] = src.y[r];
      else this.values.set(src.y.subarray(r * outputs, (r + 1) * outputs), n * outputs);
      n++;
    };
    for (const r of indices) put(train, r);
    if (this.replay) {
      const { rows, perBatch, rng } = this.replay;
      const extra = replayRowsFor(perBatch, indices.length);
      for (let k = 0; k < extra; k++) {
        if (!this.replayOrder || this.replayAt >= this.replayOrder.length) {
          this.replayOrder = shuffledOrder(rows.rows, rng);
          this.replayAt = 0;
        }
        put(rows, this.replayOrder[this.replayAt++]);
      }
    }
    const targets: Targets = this.classifier
      ? { kind: 'classes', classes: this.classes.subarray(0, n) }
      : { kind: 'values', values: this.values.subarray(0, n * outputs) };
    return { x: this.x.subarray(0, n * inputs), rows: n, targets };
  }
}
