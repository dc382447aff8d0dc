/**
 * The façade a service uses: open a model file, run batches, prove parity, save. It ties the
 * format, the engine and the parity check together; each of those can also be used alone.
 */
import type * as tf from '@tensorflow/tfjs-core';
import { tfjs } from './model/tfjs-lazy.js';
import { int8ParityReport, parityReport, randomInputs, type ParityReport } from './check/index.js';
import {
  Int8Runner,
  TfjsRunner,
  ensureEngine,
  kernelDescription,
  openRunner,
  resolveEngine,
  type EngineChoice,
  type Runner,
  type RuntimeEngine,
} from './engine/index.js';
import { DataError, ShapeError } from './errors.js';
import { readModelFile, writeModelFile } from './format/index.js';
import type { ModelDoc } from './model/index.js';

export interface OpenOptions {
  /**
   * Which engine runs the model: 'fast' (tendon's own WebAssembly SIMD kernel), 'wasm' (the
   * tfjs WebAssembly backend), 'js' (the tfjs CPU backend, always there) or 'auto' (fast, else
   * wasm, else js). 'js' and 'wasm' switch tfjs's one backend for the whole process.
   * Default 'auto'.
   */
  readonly engine?: EngineChoice;
  /** Most rows sent through the engine at once; bounds peak memory. */
  readonly chunkRows?: number;
  /** Threads sharing each call's rows, the caller included (the int8 and fast engines; the tfjs engines run on one). Default 1. */
  readonly threads?: number;
}

/** Why the last 'auto' choice fell back from the fast engine, as one line; null when it did not. */
let lastFallback: string | null = null;

export function engineFallback(): string | null {
  return lastFallback;
}

/** What the last 'auto' choice decided from the model itself (int8 for an i8-stored model), as one line; null otherwise. */
let lastNote: string | null = null;

export function engineNote(): string | null {
  return lastNote;
}

async function chooseEngine(choice: EngineChoice | undefined, doc: ModelDoc): Promise<RuntimeEngine> {
  const resolved = await resolveEngine(choice ?? 'auto', doc);
  lastFallback = resolved.fallback;
  lastNote = resolved.note ?? null;
  return resolved.engine;
}

/**
 * Open and fully check a model file, then make it resident on the engine.
 * @example
 * const model = await openModel('bakery.tendon');
 * const scores = model.run([[214, 231, 219, 44, 1.6, 790, 56]]);
 * model.dispose();
 * @throws ModelFileError naming every problem of the file (missing, damaged, inconsistent).
 */
export async function openModel(path: string, options: OpenOptions = {}): Promise<TendonModel> {
  const read = await readModelFile(path);
  const engine = await chooseEngine(options.engine, read.doc);
  return new TendonModel(read.doc, engine, {
    source: path,
    checksum: read.checksum,
    bytes: read.bytes,
    formatVersion: `${read.version.major}.${read.version.minor}`,
    chunkRows: options.chunkRows,
    threads: options.threads,
  });
}

/**
 * Make a model resident from a document held in memory (built by `buildFromSpec`, decoded
 * from bytes, or returned by a tune).
 * @throws ModelFileError when the document is inconsistent.
 */
export async function modelFromDocument(doc: ModelDoc, options: OpenOptions = {}): Promise<TendonModel> {
  // The runner validates the document (once) as it is opened.
  const engine = await chooseEngine(options.engine, doc);
  return new TendonModel(doc, engine, {
    source: null,
    checksum: null,
    bytes: null,
    formatVersion: null,
    chunkRows: options.chunkRows,
    threads: options.threads,
  });
}

interface ModelOrigin {
  readonly source: string | null;
  readonly checksum: string | null;
  readonly bytes: number | null;
  readonly formatVersion: string | null;
  readonly chunkRows?: number;
  readonly threads?: number;
}

export class TendonModel {
  /** What runs the model: a tfjs runner (js or wasm) or tendon's own kernel (fast). */
  readonly runner: Runner;
  /** Where the model was read from, or null for a document made in memory. */
  readonly source: string | null;
  /** CRC-32 of the file's payload (8 hex digits), or null for a document made in memory. */
  readonly checksum: string | null;
  /** Size of the file on disk, or null. */
  readonly fileBytes: number | null;
  /** The file's format version ("major.minor"), or null for a document made in memory. */
  readonly formatVersion: string | null;

  constructor(
    readonly doc: ModelDoc,
    engine: RuntimeEngine,
    origin: ModelOrigin,
  ) {
    const options = { chunkRows: origin.chunkRows, source: origin.source ?? '(document)', threads: origin.threads };
    this.runner = openRunner(doc, engine, options);
    this.source = origin.source;
    this.checksum = origin.checksum;
    this.fileBytes = origin.bytes;
    this.formatVersion = origin.formatVersion;
  }

  get engine(): RuntimeEngine {
    return this.runner.engine;
  }
  /** Which kernel runs the model, in words. */
  get kernel(): string {
    if (!(this.runner instanceof Int8Runner)) return kernelDescription(this.runner.engine);
    const ranges = this.doc.activationRanges;
    return `${this.runner.kernel}; activations on ${ranges ? `the stored ranges (recorded on ${ranges.rows} rows)` : "each row's own range"}`;
  }
  get inputs(): number {
    return this.doc.inputs;
  }
  get outputs(): number {
    return this.runner.outputs;
  }
  get features(): readonly string[] | null {
    return this.doc.features;
  }
  get labels(): readonly string[] | null {
    return this.doc.labels;
  }

  /**
   * Inference on raw features (normalisation is applied inside the model).
   * - rows as arrays of numbers -> rows as arrays of numbers
   * - a Float32Array holding `rows` rows -> a Float32Array of rows x outputs
   * - a 2-D tensor -> a 2-D tensor the caller disposes
   * Large batches run in chunks; no tfjs tensor outlives the call.
   * @example model.run([[0.05, 0.1]]) // [[0.7514, 0.7729]]
   * @throws ShapeError when a row's width differs from the model's inputs.
   */
  run(batch: readonly (readonly number[])[]): number[][];
  run(batch: Float32Array, rows: number): Float32Array;
  run(batch: tf.Tensor2D): tf.Tensor2D;
  run(batch: readonly (readonly number[])[] | Float32Array | tf.Tensor2D, rows?: number): number[][] | Float32Array | tf.Tensor2D {
    // Only a tensor is neither of the other two; tfjs is loaded for it alone (the caller has it already).
    if (!(batch instanceof Float32Array) && !Array.isArray(batch) && batch instanceof tfjs().Tensor) {
      if (batch.rank !== 2) throw new ShapeError('input tensor', ['rows', this.inputs], batch.shape, 'run');
      if (this.runner instanceof TfjsRunner) return this.runner.runTensor(batch);
      if (batch.shape[1] !== this.inputs) throw new ShapeError('input tensor', ['rows', this.inputs], batch.shape, 'run');
      const rowsIn = batch.shape[0];
      ensureEngine(); // the fast and int8 engines run without tfjs; the answer goes back as a tensor on its backend
      return tfjs().tensor2d(this.runner.run(Float32Array.from(batch.dataSync()), rowsIn), [rowsIn, this.outputs]);
    }
    if (batch instanceof Float32Array) {
      const n = rows ?? batch.length / this.inputs;
      if (!Number.isInteger(n) || n < 0 || batch.length !== n * this.inputs) {
        throw new ShapeError('input', [n, this.inputs], [batch.length], 'run (Float32Array holds rows x inputs values)');
      }
      return this.runner.run(batch, n);
    }
    const packed = packRows(batch, this.inputs);
    const out = this.runner.run(packed, batch.length);
    const width = this.outputs;
    return Array.from({ length: batch.length }, (_, r) => Array.from(out.subarray(r * width, (r + 1) * width)));
  }

  /**
   * Parity of the engine against the float64 reference, per layer and at the output. Without
   * inputs, uses 256 seeded random rows drawn around the model's normalisation statistics.
   * @example const report = model.check(); if (!report.pass) throw ...
   */
  check(input?: { x: Float32Array; rows: number }, seed = 1): ParityReport {
    const rows = input?.rows ?? 256;
    const x = input?.x ?? randomInputs(this.doc, rows, seed);
    // The integer engine is held to the tolerance its quantisation steps allow (check/tolerance.ts).
    if (this.runner instanceof Int8Runner) return int8ParityReport(this.doc, x, rows, this.runner);
    return parityReport(this.doc, x, rows, { runner: this.runner });
  }

  /**
   * Write the model atomically (temporary file, flush, rename): the target holds either the
   * old complete file or the new one, never half of one.
   */
  async save(path: string): Promise<{ checksum: string; bytes: number }> {
    return writeModelFile(path, this.doc);
  }

  /** Free the engine's tensors. */
  dispose(): void {
    this.runner.dispose();
  }
}

function packRows(batch: readonly (readonly number[])[], width: number): Float32Array {
  const out = new Float32Array(batch.length * width);
  batch.forEach((row, r) => {
    if (!Array.isArray(row) || row.length !== width) {
      throw new ShapeError(`input row ${r}`, [width], [Array.isArray(row) ? row.length : 0], 'run');
    }
    for (let c = 0; c < width; c++) {
      const v = row[c];
      if (typeof v !== 'number' || Number.isNaN(v)) {
        throw new DataError('(rows passed to run)', r + 1, c + 1, `${JSON.stringify(v) ?? String(v)} is not a number`);
      }
      out[r * width + c] = v;
    }
  });
  return out;
}
