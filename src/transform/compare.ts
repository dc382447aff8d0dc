/**
 * Two models on the same rows, both on the float64 reference path: how far apart their outputs
 * are. Used to judge a shrunken or folded model against its parent.
 */
import { compareMatrices, FLOAT32_TOLERANCE, topClassAgreement, type Tolerance } from '../check/index.js';
import { ShapeError } from '../errors.js';
import { modelWidths, outputsAreClasses, type ModelDoc } from '../model/index.js';
import { referenceForward, toMat64 } from '../reference/index.js';

export interface OutputComparison {
  readonly rows: number;
  readonly maxAbs: number;
  readonly maxRel: number;
  /** Where the worst element is (0-based), -1 with no rows. */
  readonly worstRow: number;
  readonly worstCol: number;
  /** Share of rows whose largest output is in the same column; null for regression, one output or no rows. */
  readonly topClassAgreement: number | null;
  /** The worst element's error over its bound (the smaller of the abs and rel ratios): <= 1 passes. */
  readonly worstRatio: number;
  readonly tolerance: Tolerance;
  readonly pass: boolean;
}

/**
 * Compare `candidate` with `parent` on `rows` raw rows `x` (rows x inputs, row-major).
 * @example compareOutputs(parent, shrinkModel(parent, 'f16'), randomInputs(parent, 256, 1), 256, SHRINK_TOLERANCE.f16)
 * @throws ShapeError when the two models take or give different widths.
 */
export function compareOutputs(
  parent: ModelDoc,
  candidate: ModelDoc,
  x: Float32Array,
  rows: number,
  tolerance: Tolerance = FLOAT32_TOLERANCE,
): OutputComparison {
  const outParent = modelWidths(parent).at(-1)!;
  const outCandidate = modelWidths(candidate).at(-1)!;
  if (parent.inputs !== candidate.inputs) throw new ShapeError('candidate inputs', [parent.inputs], [candidate.inputs], 'compare with parent');
  if (outParent !== outCandidate) throw new ShapeError('candidate outputs', [outParent], [outCandidate], 'compare with parent');
  const a = referenceForward(candidate, toMat64(x, rows, candidate.inputs)).y.data;
  return compareWithParent(parent, a, x, rows, tolerance);
}

/**
 * Outputs `candidate` (rows x outputs, from any path: the reference, or an engine such as int8)
 * against `parent` run on the float64 reference path over the same rows `x`.
 * @example compareWithParent(parent, int8Runner.run(x, rows), x, rows, SHRINK_TOLERANCE.i8).topClassAgreement
 * @throws ShapeError when the candidate does not hold rows x the parent's outputs.
 */
export function compareWithParent(
  parent: ModelDoc,
  candidate: ArrayLike<number>,
  x: Float32Array,
  rows: number,
  tolerance: Tolerance = FLOAT32_TOLERANCE,
): OutputComparison {
  const outParent = modelWidths(parent).at(-1)!;
  if (candidate.length !== rows * outParent) throw new ShapeError('candidate outputs', [rows, outParent], [candidate.length], 'compare with parent');
  const a = candidate;
  const b = referenceForward(parent, toMat64(x, rows, parent.inputs)).y.data;
  const d = compareMatrices(a, b, outParent, tolerance);
  return {
    rows,
    maxAbs: d.maxAbs,
    maxRel: d.maxRel,
    worstRow: d.worstRow,
    worstCol: d.worstCol,
    // Regression outputs have no top class: their measure is the largest output change above.
    topClassAgreement: outParent > 1 && rows > 0 && outputsAreClasses(parent) ? topClassAgreement(a, b, rows, outParent) : null,
    worstRatio: d.worstRatio,
    tolerance,
    pass: d.pass,
  };
}
