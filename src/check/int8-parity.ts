/**
 * Parity of the integer engine: its outputs, layer by layer, against the float64 reference on the
 * model's stored (dequantised) weights, each element held to the deviation its activation
 * quantisation carries (derived in tolerance.ts), plus the float32 tolerance. With stored
 * activation ranges the rounding step is the range's, and what clamping moved is carried beside
 * the deviations as a bound of its own.
 */
import { modelWidths, type DenseLayer, type ModelDoc } from '../model/index.js';
import { normalise64, referenceForward, toMat64 } from '../reference/index.js';
import { topClassAgreement } from './compare.js';
import type { Runner } from '../engine/index.js';
import type { LayerParity, OutputParity, ParityReport } from './parity.js';
import { FLOAT32_TOLERANCE, INT8_LIPSCHITZ, int8Allowed, int8RoundingVariance, int8StoredRange, relativeError } from './tolerance.js';

/**
 * A dense layer's output deviations (`bound`, one standard deviation per element) and clamping
 * bound (`shift`), from what its input carried and the rounding of its input's codes: the row's
 * own range, or the stored one (`stored`) with its clamping.
 */
function denseBounds(
  layer: DenseLayer,
  rows: number,
  inW: number,
  from: { input: Float64Array; carried: Float64Array; shifted: Float64Array },
  stored: ReturnType<typeof int8StoredRange> | null,
): { bound: Float64Array; shift: Float64Array } {
  const outW = layer.size;
  const lipschitz = INT8_LIPSCHITZ[layer.activation](layer.alpha);
  const bound = new Float64Array(rows * outW);
  const shift = new Float64Array(rows * outW);
  for (let r = 0; r < rows; r++) {
    const e = from.carried.subarray(r * inW, (r + 1) * inW);
    const d = from.shifted.subarray(r * inW, (r + 1) * inW);
    const xr = from.input.subarray(r * inW, (r + 1) * inW);
    let maxE = 0;
    let maxD = 0;
    for (let k = 0; k < inW; k++) {
      maxE = Math.max(maxE, e[k]);
      maxD = Math.max(maxD, d[k]);
    }
    const rounding = stored ? stored.variance : int8RoundingVariance(xr, maxE, maxD);
    let rowMax = 0;
    let rowShift = 0;
    for (let n = 0; n < outW; n++) {
      let v = 0;
      let moved = 0;
      for (let k = 0; k < inW; k++) {
        const w = layer.weight[k * outW + n];
        v += w * w * (e[k] * e[k] + rounding);
        moved += Math.abs(w) * (d[k] + (stored ? stored.clampError(xr[k]) : 0));
      }
      bound[r * outW + n] = Math.sqrt(v);
      shift[r * outW + n] = moved;
      rowMax = Math.max(rowMax, bound[r * outW + n]);
      rowShift = Math.max(rowShift, moved);
    }
    // Softmax mixes a row: its deviation is taken from the row's largest input deviation.
    if (layer.activation === 'softmax') {
      bound.fill(rowMax * lipschitz, r * outW, (r + 1) * outW);
      shift.fill(rowShift * lipschitz, r * outW, (r + 1) * outW);
    } else {
      for (let n = 0; n < outW; n++) {
        bound[r * outW + n] *= lipschitz;
        shift[r * outW + n] *= lipschitz;
      }
    }
  }
  return { bound, shift };
}

/**
 * Run the integer engine (`session`) and the reference on `x` (rows x inputs raw features).
 * The report's `tolerance.abs` is the widest per-element allowance met anywhere.
 * @example int8ParityReport(doc, randomInputs(doc, 256, 1), 256, new Int8Runner(doc)).pass
 */
export function int8ParityReport(doc: ModelDoc, x: Float32Array, rows: number, session: Pick<Runner, 'runLayers'>): ParityReport {
  const widths = modelWidths(doc);
  const engineLayers = session.runLayers(x, rows);
  const ref = referenceForward(doc, toMat64(x, rows, doc.inputs), { keepLayers: true });
  const refLayers = ref.layers ?? [];
  let input = normalise64(doc.normalise, toMat64(x, rows, doc.inputs)).data;
  let carried: Float64Array = new Float64Array(rows * widths[0]);
  // A deterministic bound beside the deviations: what clamping onto stored ranges moved (0 without them).
  let shifted: Float64Array = new Float64Array(rows * widths[0]);
  let widest = 0;
  let denseOrdinal = 0;
  const layers: LayerParity[] = doc.layers.map((layer, i) => {
    const inW = widths[i];
    const outW = widths[i + 1];
    let bound: Float64Array;
    let shift: Float64Array;
    if (layer.kind === 'dense') {
      const stored = doc.activationRanges ? int8StoredRange(doc.activationRanges.min[denseOrdinal], doc.activationRanges.max[denseOrdinal]) : null;
      denseOrdinal++;
      ({ bound, shift } = denseBounds(layer, rows, inW, { input, carried, shifted }, stored));
    } else if (layer.kind === 'batchnorm') {
      bound = new Float64Array(rows * outW);
      shift = new Float64Array(rows * outW);
      for (let r = 0; r < rows; r++) {
        for (let c = 0; c < outW; c++) {
          const gain = Math.abs(layer.gamma[c] / Math.sqrt(layer.runningVariance[c] + layer.epsilon));
          bound[r * outW + c] = carried[r * inW + c] * gain;
          shift[r * outW + c] = shifted[r * inW + c] * gain;
        }
      }
    } else {
      bound = Float64Array.from(carried);
      shift = Float64Array.from(shifted);
    }
    const got = engineLayers[i];
    const want = refLayers[i].data;
    let maxAbs = 0;
    let maxRel = 0;
    let worst = -1;
    let worstRatio = -1;
    for (let j = 0; j < want.length; j++) {
      const allowed = int8Allowed(bound[j], want[j]) + shift[j];
      widest = Math.max(widest, allowed);
      const diff = Math.abs(got[j] - want[j]);
      const ratio = Number.isNaN(got[j]) !== Number.isNaN(want[j]) ? Infinity : Number.isNaN(diff) ? 0 : diff / allowed;
      maxAbs = Math.max(maxAbs, ratio === Infinity ? Infinity : diff || 0);
      maxRel = Math.max(maxRel, ratio === Infinity ? Infinity : relativeError(got[j], want[j]) || 0);
      if (ratio > worstRatio) {
        worstRatio = ratio;
        worst = j;
      }
    }
    carried = bound;
    shifted = shift;
    input = want;
    return {
      index: i,
      kind: layer.kind,
      maxAbs,
      maxRel,
      worstRow: worst < 0 ? -1 : Math.floor(worst / outW),
      worstCol: worst < 0 ? -1 : worst % outW,
      worstRatio: Math.max(worstRatio, 0),
      pass: worstRatio <= 1,
    };
  });
  const outCols = widths[widths.length - 1];
  const last = layers[layers.length - 1];
  const engineOut = engineLayers[engineLayers.length - 1];
  const output: OutputParity = {
    maxAbs: last.maxAbs,
    maxRel: last.maxRel,
    worstRow: last.worstRow,
    worstCol: last.worstCol,
    worstRatio: last.worstRatio,
    pass: last.pass,
    topClassAgreement: outCols > 1 && rows > 0 ? topClassAgreement(engineOut, ref.y.data, rows, outCols) : null,
    rows,
  };
  return { layers, output, tolerance: { abs: widest, rel: FLOAT32_TOLERANCE.rel }, pass: layers.every((l) => l.pass) };
}
