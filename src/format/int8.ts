/**
 * Symmetric per-column int8 quantisation of a row-major [rows, cols] float32 matrix.
 * For dense weights W[inputs, size] a column is one output unit, so each unit keeps its own
 * range. scale_c = maxabs_c / 127 (stored as float32), q = round(x / scale_c) clamped to
 * [-127, 127] (-128 is never written, so the code is symmetric), value = q * scale_c.
 * The round trip error is at most scale_c / 2 per element (plus float32 rounding).
 * An all-zero column gets scale 1 (its codes are all 0): readers refuse a zero scale, which
 * would silently zero whatever codes sat beside it.
 */

export interface Int8Matrix {
  /** rows * cols codes, row-major. */
  readonly codes: Int8Array;
  /** One scale per column, > 0 (1 for an all-zero column). */
  readonly scales: Float32Array;
}

/**
 * Quantise a row-major [rows, cols] matrix, one scale per column. Values must be finite.
 *
 * @example
 * quantiseColumns(new Float32Array([1, -4, -0.5, 2]), 2, 2)
 * // scales [1/127, 4/127], codes [127, -127, -64, 64]
 */
export function quantiseColumns(values: Float32Array, rows: number, cols: number): Int8Matrix {
  if (values.length !== rows * cols) {
    throw new RangeError(`quantiseColumns: ${values.length} values do not fill [${rows}, ${cols}]`);
  }
  const maxAbs = new Float64Array(cols);
  for (let r = 0; r < rows; r++) {
    const base = r * cols;
    for (let c = 0; c < cols; c++) {
      const a = Math.abs(values[base + c]);
      if (a > maxAbs[c]) maxAbs[c] = a;
    }
  }
  const scales = new Float32Array(cols);
  for (let c = 0; c < cols; c++) scales[c] = maxAbs[c] === 0 ? 1 : maxAbs[c] / 127;
  const codes = new Int8Array(rows * cols);
  for (let r = 0; r < rows; r++) {
    const base = r * cols;
    for (let c = 0; c < cols; c++) {
      const s = scales[c];
      if (maxAbs[c] === 0) continue;
      const x = values[base + c] / s;
      // Round half away from zero keeps the code symmetric; the clamp absorbs the float32
      // rounding of the scale, which can push maxabs / scale a hair past 127.
      const q = Math.sign(x) * Math.round(Math.abs(x));
      codes[base + c] = q > 127 ? 127 : q < -127 ? -127 : q;
    }
  }
  return { codes, scales };
}

/**
 * Rebuild float32 values from codes and per-column scales: value = q * scale.
 *
 * @example
 * dequantiseColumns(new Int8Array([127, -64]), new Float32Array([0.5, 0.25]), 1, 2)
 * // Float32Array [63.5, -16]
 */
export function dequantiseColumns(codes: Int8Array, scales: Float32Array, rows: number, cols: number): Float32Array {
  if (codes.length !== rows * cols || scales.length !== cols) {
    throw new RangeError(`dequantiseColumns: ${codes.length} codes and ${scales.length} scales do not fit [${rows}, ${cols}]`);
  }
  const out = new Float32Array(rows * cols);
  for (let r = 0; r < rows; r++) {
    const base = r * cols;
    // q (8 bits) times a float32 scale (24 bits) is exact in float64, so storing it in float32
    // gives the correctly rounded float32 product, the same as a float32 multiply.
    for (let c = 0; c < cols; c++) out[base + c] = codes[base + c] * scales[c];
  }
  return out;
}

/**
 * The codes and scales a decoded I8 tensor was read from, kept beside its float32 values so the
 * integer engine runs the file's own codes instead of quantising a second time. Keyed by the
 * values array itself: a document whose weights were replaced (tune, fold) has no entry.
 */
const storedCodes = new WeakMap<Float32Array, Int8Matrix>();

/** Remember that `values` were decoded from `matrix` (the decoder calls this). */
export function rememberStoredCodes(values: Float32Array, matrix: Int8Matrix): void {
  storedCodes.set(values, matrix);
}

/**
 * The codes and scales `values` were decoded from, or null when none are known or the values no
 * longer match them (changed in place since): every value is checked against code × scale.
 * @example storedCodesOf(doc.layers[0].weight, inputs, units)?.scales
 */
export function storedCodesOf(values: Float32Array, rows: number, cols: number): Int8Matrix | null {
  const matrix = storedCodes.get(values);
  if (!matrix || matrix.codes.length !== rows * cols || matrix.scales.length !== cols || values.length !== rows * cols) return null;
  const { codes, scales } = matrix;
  for (let r = 0; r < rows; r++) {
    const base = r * cols;
    for (let c = 0; c < cols; c++) if (values[base + c] !== Math.fround(codes[base + c] * scales[c])) return null;
  }
  return matrix;
}
