/**
 * What a step may change and how: the trainable tensors as optimiser slots (with their layer,
 * whether weight decay applies and whether they are frozen), the anchor that pulls weights
 * back towards their start, and the batch-norm running statistics that move outside the
 * optimiser.
 */
import { layerKind, modelWidths, type BatchStats, type ModelDoc, type ParamRef } from '../model/index.js';
import type { ResolvedTuneOptions } from './config.js';
import type { ParamSlot } from './optimisers.js';

/** One trainable tensor with where it lives. */
export interface Slot extends ParamSlot {
  readonly ref: ParamRef;
  readonly layer: number;
  /** Index among its layer's trainable tensors (the order backward returns gradients in). */
  readonly position: number;
  readonly frozen: boolean;
}

/** Every trainable tensor of `doc`, in layer order, marked frozen per the options. */
export function slotsOf(doc: ModelDoc, opts: ResolvedTuneOptions): Slot[] {
  const widths = modelWidths(doc);
  const slots: Slot[] = [];
  doc.layers.forEach((layer, i) => {
    layerKind(layer.kind)
      .trainable(layer, widths[i], i)
      .forEach((ref, position) => {
        slots.push({
          ref,
          data: ref.data,
          layer: i,
          position,
          // Decay shrinks dense weights only: biases and batch-norm scales set offsets and gains, not capacity.
          decays: layer.kind === 'dense' && ref.name.endsWith('.weight'),
          frozen: opts.freeze.has(i) || opts.freezeTensors.has(ref.name),
        });
      });
  });
  return slots;
}

/**
 * Layers whose arrays a step changes: those with an unfrozen slot, then unfrozen batch norms
 * (their running statistics move even when their scales are frozen by name).
 */
export function changedLayers(doc: ModelDoc, slots: readonly Slot[], freeze: ReadonlySet<number>): number[] {
  const changed = [...new Set(slots.filter((s) => !s.frozen).map((s) => s.layer))];
  doc.layers.forEach((l, i) => {
    if (l.kind === 'batchnorm' && !freeze.has(i) && !changed.includes(i)) changed.push(i);
  });
  return changed;
}

/** The anchor's starting weights per slot (null for frozen ones), or null without an anchor. */
export function anchorStarts(slots: readonly Slot[], anchor: number): (Float64Array | null)[] | null {
  return anchor > 0 ? slots.map((s) => (s.frozen ? null : Float64Array.from(s.data))) : null;
}

/**
 * The gradient list the optimiser takes, aligned with `slots`; frozen tensors get none. The
 * backend's arrays go through as they are (the optimiser reads them into float64) unless
 * `copy` says the anchor or clipping must change them. Anchor:
 * d/dw strength·||w - w0||² = 2·strength·(w - w0).
 */
export function stepGradients(
  slots: readonly Slot[],
  grads: readonly (readonly (Float32Array | Float64Array)[])[],
  copy: boolean,
  starts: readonly (Float64Array | null)[] | null,
  anchor: number,
): { grads: (Float32Array | Float64Array | null)[]; anchorPenalty: number } {
  let anchorPenalty = 0;
  const flat = slots.map((s, k) => {
    if (s.frozen) return null;
    if (!copy) return grads[s.layer][s.position];
    const g = Float64Array.from(grads[s.layer][s.position]);
    const start = starts?.[k];
    if (start) {
      for (let j = 0; j < g.length; j++) {
        const d = s.data[j] - start[j];
        anchorPenalty += anchor * d * d;
        g[j] += 2 * anchor * d;
      }
    }
    return g;
  });
  return { grads: flat, anchorPenalty };
}

/**
 * Move batch-norm running statistics towards a batch's: old·momentum + batch·(1 - momentum);
 * variance made unbiased (n / (n - 1)) as inference expects a population estimate. Frozen
 * layers keep theirs.
 */
export function updateRunningStatistics(doc: ModelDoc, stats: readonly (BatchStats | null)[], rows: number, freeze: ReadonlySet<number>): void {
  doc.layers.forEach((l, i) => {
    const s = stats[i];
    if (l.kind !== 'batchnorm' || !s || freeze.has(i)) return;
    const m = l.momentum;
    const unbias = rows > 1 ? rows / (rows - 1) : 1;
    for (let c = 0; c < l.runningMean.length; c++) {
      l.runningMean[c] = m * l.runningMean[c] + (1 - m) * s.mean[c];
      l.runningVariance[c] = m * l.runningVariance[c] + (1 - m) * s.variance[c] * unbias;
    }
  });
}
