/**
 * Int8 activation ranges from real rows (`shrink --store i8 --calibrate ROWS`): the model runs on
 * the float64 reference path over the stored weights, and the smallest and largest value arriving
 * at each dense layer is kept (after the input normalisation and any batch normalisation before
 * it). The int8 engine then quantises each dense layer's input onto that range instead of each
 * row's own (model/activation-ranges.ts).
 *
 * Plain min and max, not a percentile: every value the calibration rows produce stays inside its
 * range, so those rows are never clamped; a row beyond them at run time is clamped, which the
 * parity check allows for (check/int8-parity.ts).
 */
import { denseLayerIndices, validateModel, type ActivationRanges, type ModelDoc } from '../model/index.js';
import { normalise64, referenceForward, toMat64 } from '../reference/index.js';

/** Rows per reference pass: bounds the float64 copies of each layer's output. */
const PASS_ROWS = 1024;

/**
 * Collects the ranges chunk by chunk, so a file of any length streams through.
 * @example
 * const recorder = new RangeRecorder(doc);
 * for await (const chunk of chunks) recorder.add(chunk.x, chunk.rows);
 * const ranges = recorder.ranges();
 */
export class RangeRecorder {
  private readonly dense: number[];
  private readonly min: Float64Array;
  private readonly max: Float64Array;
  private rows = 0;

  constructor(private readonly doc: ModelDoc) {
    this.dense = denseLayerIndices(doc.layers);
    this.min = new Float64Array(this.dense.length).fill(Infinity);
    this.max = new Float64Array(this.dense.length).fill(-Infinity);
  }

  /**
   * Widen the ranges by `rows` raw rows (rows x inputs, row-major). Returns the index of the first
   * row that gives a NaN or infinite value at some dense layer's input (nothing of that chunk is
   * kept then), or -1.
   */
  add(x: Float32Array, rows: number): number {
    const min = this.min.slice();
    const max = this.max.slice();
    for (let start = 0; start < rows; start += PASS_ROWS) {
      const n = Math.min(PASS_ROWS, rows - start);
      const part = toMat64(x.subarray(start * this.doc.inputs, (start + n) * this.doc.inputs), n, this.doc.inputs);
      const inputs = [normalise64(this.doc.normalise, part), ...(referenceForward(this.doc, part, { keepLayers: true }).layers ?? [])];
      for (let d = 0; d < this.dense.length; d++) {
        // layers[i]'s input is the output of layers[i - 1] (or the normalised row for i = 0).
        const m = inputs[this.dense[d]];
        for (let j = 0; j < m.data.length; j++) {
          const v = m.data[j];
          if (!Number.isFinite(v)) return start + Math.floor(j / m.cols);
          if (v < min[d]) min[d] = v;
          if (v > max[d]) max[d] = v;
        }
      }
    }
    this.min.set(min);
    this.max.set(max);
    this.rows += rows;
    return -1;
  }

  /** Rows seen so far. */
  get seen(): number {
    return this.rows;
  }

  /** The ranges seen so far; null before any row. */
  ranges(): ActivationRanges | null {
    if (this.rows === 0) return null;
    return { min: this.min.slice(), max: this.max.slice(), rows: this.rows };
  }
}

/**
 * The ranges of `rows` raw rows in one call.
 * @example recordActivationRanges(doc, x, rows)!.max // one per dense layer
 */
export function recordActivationRanges(doc: ModelDoc, x: Float32Array, rows: number): ActivationRanges | null {
  const recorder = new RangeRecorder(doc);
  if (recorder.add(x, rows) >= 0) return null;
  return recorder.ranges();
}

/**
 * `doc` with `ranges` stored (checked: one finite pair per dense layer). The layers are shared,
 * so an i8 document keeps its stored codes.
 * @example const calibrated = withActivationRanges(shrinkModel(doc, 'i8'), ranges);
 * @throws ModelFileError naming the layer when a range is unusable.
 */
export function withActivationRanges(doc: ModelDoc, ranges: ActivationRanges): ModelDoc {
  const out: ModelDoc = { ...doc, activationRanges: ranges };
  validateModel(out, '(model being calibrated)');
  return out;
}
