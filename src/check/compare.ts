/** Element-wise comparison of an engine matrix with its reference. */
import { relativeError, toleranceRatio, type Tolerance } from './tolerance.js';

export interface Discrepancy {
  /** Largest |a - b| (Infinity when a NaN appears on one side only). */
  readonly maxAbs: number;
  /** Largest |a - b| / max(|b|, REL_FLOOR). */
  readonly maxRel: number;
  /** The element furthest past the tolerance (0-based); -1 when there are no elements. */
  readonly worstRow: number;
  readonly worstCol: number;
  /** How far the worst element is past its bound (the smaller of abs and rel ratio): <= 1 passes. */
  readonly worstRatio: number;
  readonly pass: boolean;
}

/** Compare a (engine, float32) with b (reference, float64), both rows x cols row-major. */
export function compareMatrices(a: ArrayLike<number>, b: ArrayLike<number>, cols: number, tol: Tolerance): Discrepancy {
  if (a.length !== b.length) throw new RangeError(`compareMatrices: ${a.length} engine values against ${b.length} reference values`);
  let maxAbs = 0;
  let maxRel = 0;
  let worst = -1;
  let worstRatio = -1;
  for (let i = 0; i < a.length; i++) {
    const ratio = toleranceRatio(a[i], b[i], tol);
    const oneSidedNaN = ratio === Infinity && (Number.isNaN(a[i]) || Number.isNaN(b[i]));
    maxAbs = Math.max(maxAbs, oneSidedNaN ? Infinity : Math.abs(a[i] - b[i]) || 0);
    maxRel = Math.max(maxRel, oneSidedNaN ? Infinity : relativeError(a[i], b[i]) || 0);
    if (ratio > worstRatio) {
      worstRatio = ratio;
      worst = i;
    }
  }
  return {
    maxAbs,
    maxRel,
    worstRow: worst < 0 ? -1 : Math.floor(worst / cols),
    worstCol: worst < 0 ? -1 : worst % cols,
    worstRatio: Math.max(worstRatio, 0),
    pass: worstRatio <= 1,
  };
}

/** Share of rows (rows x cols, row-major) whose largest value sits in the same column in a and b. */
export function topClassAgreement(a: ArrayLike<number>, b: ArrayLike<number>, rows: number, cols: number): number {
  let agree = 0;
  for (let r = 0; r < rows; r++) if (argmaxAt(a, r * cols, cols) === argmaxAt(b, r * cols, cols)) agree++;
  return agree / rows;
}

function argmaxAt(v: ArrayLike<number>, offset: number, n: number): number {
  let best = 0;
  for (let j = 1; j < n; j++) if (v[offset + j] > v[offset + best]) best = j;
  return best;
}
