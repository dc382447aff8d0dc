/**
 * Parity: the engine (float32, tfjs) against the reference (float64, plain loops) on the same
 * raw inputs, layer by layer and at the output. This module is the one place that sees both.
 */
import { ensureEngine, openRunner, type Runner } from '../engine/index.js';
import { ParityError } from '../errors.js';
import { modelWidths, SeededRng, type ModelDoc } from '../model/index.js';
import { referenceForward, toMat64 } from '../reference/index.js';
import { compareMatrices, topClassAgreement, type Discrepancy } from './compare.js';
import { FLOAT32_TOLERANCE, type Tolerance } from './tolerance.js';

export interface LayerParity extends Discrepancy {
  readonly index: number;
  readonly kind: string;
}

export interface OutputParity extends Discrepancy {
  /** Share of rows whose largest output is in the same column on both paths; null for one output or no rows. */
  readonly topClassAgreement: number | null;
  readonly rows: number;
}

export interface ParityReport {
  readonly layers: LayerParity[];
  readonly output: OutputParity;
  readonly tolerance: Tolerance;
  readonly pass: boolean;
}

export interface ParityOptions {
  /** Compare this runner (e.g. one on the wasm or fast engine) instead of a fresh one on the process's tfjs engine. */
  readonly runner?: Runner;
  readonly tolerance?: Tolerance;
}

/**
 * Run both paths on `x` (rows x inputs raw features) and compare.
 * @example const report = parityReport(doc, randomInputs(doc, 256, 1), 256); report.pass
 */
export function parityReport(doc: ModelDoc, x: Float32Array, rows: number, opts: ParityOptions = {}): ParityReport {
  const tolerance = opts.tolerance ?? FLOAT32_TOLERANCE;
  const runner = opts.runner ?? openRunner(doc, ensureEngine());
  try {
    const engineLayers = runner.runLayers(x, rows);
    const ref = referenceForward(doc, toMat64(x, rows, doc.inputs), { keepLayers: true });
    const refLayers = ref.layers ?? [];
    const widths = modelWidths(doc);
    const layers = doc.layers.map((layer, i) => ({
      index: i,
      kind: layer.kind,
      ...compareMatrices(engineLayers[i], refLayers[i].data, widths[i + 1], tolerance),
    }));
    const outCols = widths[widths.length - 1];
    const engineOut = engineLayers[engineLayers.length - 1];
    const output: OutputParity = {
      ...compareMatrices(engineOut, ref.y.data, outCols, tolerance),
      topClassAgreement: outCols > 1 && rows > 0 ? topClassAgreement(engineOut, ref.y.data, rows, outCols) : null,
      rows,
    };
    return { layers, output, tolerance, pass: output.pass && layers.every((l) => l.pass) };
  } finally {
    if (!opts.runner) runner.dispose();
  }
}

/**
 * Throw when a report fails, naming the first failing layer (or the output).
 * @throws ParityError
 */
export function assertParity(report: ParityReport): void {
  if (report.pass) return;
  const bad = report.layers.find((l) => !l.pass);
  const where = bad
    ? `layers[${bad.index}] (${bad.kind}) row ${bad.worstRow}, column ${bad.worstCol}`
    : `output row ${report.output.worstRow}, column ${report.output.worstCol}`;
  const d = bad ?? report.output;
  throw new ParityError(where, d.maxAbs, d.maxRel, report.tolerance);
}

/**
 * Invented raw inputs for a parity check when the user gives none, drawn with a seeded RNG
 * around the model's own normalisation statistics: zscore → mean + std·N(0, 1); minmax →
 * uniform over [min, max]; none (or not fitted) → N(0, 1).
 * @example randomInputs(doc, 100, 42) // Float32Array of 100 x doc.inputs
 */
export function randomInputs(doc: ModelDoc, rows: number, seed: number): Float32Array {
  const rng = new SeededRng(seed);
  const n = doc.inputs;
  const x = new Float32Array(rows * n);
  const norm = doc.normalise;
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < n; c++) {
      let v: number;
      if (norm?.method === 'zscore' && norm.mean && norm.std) v = norm.mean[c] + norm.std[c] * rng.normal();
      else if (norm?.method === 'minmax' && norm.min && norm.max) v = norm.min[c] + (norm.max[c] - norm.min[c]) * rng.next();
      else v = rng.normal();
      x[r * n + c] = v;
    }
  }
  return x;
}
