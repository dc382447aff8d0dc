/**
 * Divergence detection: per-layer squared gradient norms that double as the finiteness test,
 * and the checks that name the first layer or tensor to go NaN or infinite. These run over
 * every gradient and weight each step, hence the unrolled sums.
 */
import type { ModelDoc } from '../model/index.js';
import type { Slot } from './param-slots.js';

/** Σ v² in float64, in four interleaved partial sums (independent adds run in parallel). */
function sumSquares(a: Float32Array | Float64Array): number {
  let s0 = 0;
  let s1 = 0;
  let s2 = 0;
  let s3 = 0;
  const n = a.length;
  let j = 0;
  for (; j + 4 <= n; j += 4) {
    s0 += a[j] * a[j];
    s1 += a[j + 1] * a[j + 1];
    s2 += a[j + 2] * a[j + 2];
    s3 += a[j + 3] * a[j + 3];
  }
  for (; j < n; j++) s0 += a[j] * a[j];
  return s0 + s1 + s2 + s3;
}

/** True when no value is NaN or infinite: v * 0 is 0 for finite v and NaN otherwise. */
function allFinite(a: ArrayLike<number>): boolean {
  // Four sums so the adds do not wait on one another (this runs over every weight each step).
  let s0 = 0;
  let s1 = 0;
  let s2 = 0;
  let s3 = 0;
  const n = a.length;
  let i = 0;
  for (; i + 4 <= n; i += 4) {
    s0 += a[i] * 0;
    s1 += a[i + 1] * 0;
    s2 += a[i + 2] * 0;
    s3 += a[i + 3] * 0;
  }
  for (; i < n; i++) s0 += a[i] * 0;
  return s0 + s1 + s2 + s3 === 0;
}

/** How a divergence message names layer `i`. */
export function layerLabel(doc: ModelDoc, i: number): string {
  return `layers[${i}] (${doc.layers[i].kind})`;
}

/** Per layer with slots (in slot order): the squared L2 norm of its data-loss gradients. */
export function layerSquaredNorms(slots: readonly Slot[], grads: readonly (readonly (Float32Array | Float64Array)[])[]): Map<number, number> {
  const layerSq = new Map<number, number>();
  for (const s of slots) {
    layerSq.set(s.layer, (layerSq.get(s.layer) ?? 0) + sumSquares(grads[s.layer][s.position]));
  }
  return layerSq;
}

/**
 * The first layer in backward order whose gradient is not finite, or -1. A sum of squares is
 * finite unless some value is not (or squares overflow, which allFinite then tells apart).
 */
export function firstNonFiniteLayer(layerSq: ReadonlyMap<number, number>, grads: readonly (readonly (Float32Array | Float64Array)[])[]): number {
  for (let i = grads.length - 1; i >= 0; i--) {
    if (!Number.isFinite(layerSq.get(i) ?? 0) && !grads[i].every(allFinite)) return i;
  }
  return -1;
}

/** The first unfrozen slot an update left with a NaN or infinite value, if any. */
export function firstBrokenSlot(slots: readonly Slot[]): Slot | undefined {
  return slots.find((s) => !s.frozen && !allFinite(s.data));
}
