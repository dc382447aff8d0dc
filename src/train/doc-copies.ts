/**
 * Copies of a model document and of the arrays a run changes. The tune loop works on its own
 * copy (the caller's document is never changed) and keeps snapshots of the changing arrays so
 * it can hand back the last good weights after a divergence, or the best epoch's weights under
 * early stopping.
 */
import { layerKind, modelWidths, type Layer, type ModelDoc } from '../model/index.js';
import { copyNormalisation } from './normalisation.js';

function cloneLayer(layer: Layer): Layer {
  return layerKind(layer.kind).clone(layer);
}

/**
 * A deep copy: the result shares no array with `doc`.
 *
 * @example const work = cloneDoc(doc); work.layers[0] !== doc.layers[0] // true
 */
export function cloneDoc(doc: ModelDoc): ModelDoc {
  return {
    ...doc,
    features: doc.features && [...doc.features],
    labels: doc.labels && [...doc.labels],
    normalise: doc.normalise && copyNormalisation(doc.normalise),
    ...(doc.targetScaling ? { targetScaling: { mean: doc.targetScaling.mean.slice(), std: doc.targetScaling.std.slice() } } : {}),
    layers: doc.layers.map(cloneLayer),
    meta: { ...doc.meta, extra: { ...doc.meta.extra } },
    provenance: doc.provenance.map((p) => ({ ...p })),
  };
}

/** Every float32 array the run may change: every stored tensor (trainable ones and batch-norm running statistics). */
export function mutableArrays(doc: ModelDoc): Float32Array[] {
  const widths = modelWidths(doc);
  return doc.layers.flatMap((l, i) =>
    layerKind(l.kind)
      .tensors(l, widths[i], i)
      .map((t) => t.data),
  );
}

/** Copies of `arrays`: new ones, or written into `into` (same shapes) to spare allocations each step. */
export function snapshot(arrays: Float32Array[], into?: Float32Array[]): Float32Array[] {
  if (!into) return arrays.map((a) => a.slice());
  arrays.forEach((a, i) => into[i].set(a));
  return into;
}

/** Write a snapshot back into the arrays it was taken from. */
export function restore(arrays: Float32Array[], from: Float32Array[]): void {
  arrays.forEach((a, i) => a.set(from[i]));
}
