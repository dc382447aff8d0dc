/**
 * Stored activation ranges for the int8 engine: one [min, max] per dense layer, the range of
 * that layer's input seen when the float model ran on real rows (`shrink --calibrate`). The
 * engine then quantises each dense layer's input onto that fixed range (values outside it are
 * clamped) instead of measuring each row's own range. Only the int8 engine reads them; every
 * other path, and a reader that skips them, answers as without.
 *
 * The ranges describe the weights they were recorded with: anything that changes weights or the
 * input normalisation (tune, fold) drops them.
 */
import type { Problem } from '../errors.js';
import type { Layer, ModelDoc } from './types.js';

/** Indices of the dense layers, in order: the i-th range belongs to layers[denseIndices[i]]. */
export function denseLayerIndices(layers: readonly Layer[]): number[] {
  return layers.flatMap((l, i) => (l.kind === 'dense' ? [i] : []));
}

/**
 * Problems with stored ranges: one pair per dense layer, every bound finite, min <= max. Each
 * problem names the layer it is about.
 * @example activationRangeProblems(doc) // [{ where: 'activation_ranges', message: 'layers[2] (dense): min 3 is above max 1' }]
 */
export function activationRangeProblems(doc: Pick<ModelDoc, 'layers' | 'activationRanges'>): Problem[] {
  const ranges = doc.activationRanges;
  if (!ranges) return [];
  const where = 'activation_ranges';
  const dense = denseLayerIndices(doc.layers);
  if (ranges.min.length !== dense.length || ranges.max.length !== dense.length) {
    return [
      {
        where,
        message: `has ${ranges.min.length} min and ${ranges.max.length} max values, expected one per dense layer (${dense.length}: ${dense.map((i) => `layers[${i}]`).join(', ')})`,
      },
    ];
  }
  const problems: Problem[] = [];
  dense.forEach((layer, i) => {
    const lo = ranges.min[i];
    const hi = ranges.max[i];
    const name = `layers[${layer}] (dense)`;
    if (!Number.isFinite(lo) || !Number.isFinite(hi)) problems.push({ where, message: `${name}: range [${lo}, ${hi}] must be finite` });
    else if (lo > hi) problems.push({ where, message: `${name}: min ${lo} is above max ${hi}` });
  });
  if (!(Number.isSafeInteger(ranges.rows) && ranges.rows >= 0)) problems.push({ where, message: `rows must be a whole number, got ${ranges.rows}` });
  return problems;
}

/**
 * The model cut after layer `index`, whose output is that layer's (so no labels): what the
 * engines run for their per-layer parity outputs. Stored int8 ranges are cut with the layers
 * (those of the dense layers kept), so the prefix stays a valid model.
 * @example modelCutAfter(doc, 1).layers.length // 2
 */
export function modelCutAfter(doc: ModelDoc, index: number): ModelDoc {
  const layers = doc.layers.slice(0, index + 1);
  const ranges = doc.activationRanges;
  const kept = denseLayerIndices(layers).length;
  const activationRanges = ranges ? { min: ranges.min.slice(0, kept), max: ranges.max.slice(0, kept), rows: ranges.rows } : null;
  return { ...doc, layers, labels: null, activationRanges };
}
