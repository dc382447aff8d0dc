/**
 * Whole-network float64 passes: inference, training forward with a tape, and backward over the
 * tape. Plain loops only (through the layer kinds' reference halves); no tfjs.
 */
import { layerKind, type BackwardOptions, type BatchStats, type ForwardContext, type Mat64, type ModelDoc } from '../model/index.js';
import { mat64, runningForm } from '../model/index.js';
import { normalise64 } from './normalise.js';

const INFERENCE: ForwardContext = {
  training: false,
  dropoutMask: () => {
    throw new Error('dropout masks are not drawn at inference');
  },
};

/**
 * Inference in float64: normalise the raw features, then each layer in inference mode, with a
 * stored calibration temperature or target scaling folded into the output layer as the engines
 * run it (model/running-form.ts).
 * `layers` (with keepLayers) holds each layer's output, in order.
 * @example referenceForward(doc, mat64(1, 2, Float64Array.of(0.05, 0.1))).y
 */
export function referenceForward(doc: ModelDoc, x: Mat64, opts: { keepLayers?: boolean } = {}): { y: Mat64; layers?: Mat64[] } {
  const running = runningForm(doc);
  let h = normalise64(running.normalise, x);
  const layers: Mat64[] = [];
  running.layers.forEach((layer, i) => {
    h = layerKind(layer.kind).reference.forward(layer, h, INFERENCE, i).y;
    if (opts.keepLayers) layers.push(h);
  });
  return opts.keepLayers ? { y: h, layers } : { y: h };
}

/** What one layer kept from a training forward. */
export interface ReferenceTapeEntry {
  readonly saved: unknown;
  /** Batch statistics of a batchnorm layer in training mode. */
  readonly stats?: BatchStats;
}

/**
 * A forward pass that records what backward needs. `z` is the last layer's pre-activation (the
 * logits) when the last layer is dense, else null.
 * @example const { y, z, tape } = referenceForwardTrain(doc, x, ctx)
 */
export function referenceForwardTrain(doc: ModelDoc, x: Mat64, ctx: ForwardContext): { y: Mat64; z: Mat64 | null; tape: ReferenceTapeEntry[] } {
  let h = normalise64(doc.normalise, x);
  let z: Mat64 | null = null;
  const tape: ReferenceTapeEntry[] = [];
  doc.layers.forEach((layer, i) => {
    const out = layerKind(layer.kind).reference.forward(layer, h, ctx, i);
    tape.push(out.stats ? { saved: out.saved, stats: out.stats } : { saved: out.saved });
    h = out.y;
    z = out.z ?? null;
  });
  return { y: h, z, tape };
}

/**
 * Backward over a tape from referenceForwardTrain. `dyOrDz` is dLoss/dy on the output, or, with
 * `dyIsPreActivation`, dLoss/dz on the last dense layer's pre-activation. Returns dLoss/dx on the
 * normalised input and, per layer, one gradient per trainable parameter (empty for dropout).
 * @throws Error when dyIsPreActivation is set and the last layer is not dense.
 */
export function referenceBackwardTape(
  doc: ModelDoc,
  tape: readonly ReferenceTapeEntry[],
  dyOrDz: Mat64,
  opts: BackwardOptions = {},
): { dx: Mat64; grads: Float64Array[][] } {
  const last = doc.layers.length - 1;
  if (opts.dyIsPreActivation && doc.layers[last]?.kind !== 'dense') {
    throw new Error(`dyIsPreActivation needs a dense last layer; layers[${last}] is ${doc.layers[last]?.kind}`);
  }
  const grads: Float64Array[][] = new Array(doc.layers.length);
  let d = dyOrDz;
  for (let i = last; i >= 0; i--) {
    const layer = doc.layers[i];
    const back = layerKind(layer.kind).reference.backward(layer, tape[i].saved, d, i === last ? opts : {});
    grads[i] = back.grads;
    d = back.dx;
  }
  return { dx: d, grads };
}

/** A Float32Array batch (rows x cols) as a float64 matrix. */
export function toMat64(data: Float32Array | Float64Array, rows: number, cols: number): Mat64 {
  return mat64(rows, cols, Float64Array.from(data));
}
