/** Whole-model checks: widths chain from layer to layer, and every stored number is usable. */
import { ModelFileError, type Problem } from '../errors.js';
import { isLayerKindName, layerKind } from './layers/catalogue.js';
import { finiteProblems, isPositiveInt } from './layers/checks.js';
import { temperatureProblems } from './temperature.js';
import { activationRangeProblems } from './activation-ranges.js';
import { targetScalingProblems } from './target-scaling.js';
import type { ModelDoc } from './types.js';

/**
 * Throws one ModelFileError listing every problem found (never only the first), so a user fixes
 * all in one pass. `path` names the file in the message.
 * @example validateModel(doc, 'scorer.tdn') // throws ModelFileError('scorer.tdn', [...])
 * @throws ModelFileError
 */
export function validateModel(doc: ModelDoc, path: string): void {
  const problems = modelProblems(doc);
  if (problems.length > 0) throw new ModelFileError(path, problems);
}

/** Every problem with a model document; empty when it is usable. */
export function modelProblems(doc: ModelDoc): Problem[] {
  const problems: Problem[] = [];
  if (!isPositiveInt(doc.inputs)) {
    problems.push({ where: 'inputs', message: `must be a positive integer, got ${doc.inputs}` });
    return problems;
  }
  if (doc.features && doc.features.length !== doc.inputs) {
    problems.push({ where: 'features', message: `has ${doc.features.length} names, expected one per input (${doc.inputs})` });
  }
  problems.push(...normalisationProblems(doc));
  if (doc.layers.length === 0) problems.push({ where: 'layers', message: 'a model needs at least one layer' });

  let width = doc.inputs;
  doc.layers.forEach((layer, i) => {
    const kindName: string = layer.kind;
    if (!isLayerKindName(kindName)) {
      problems.push({ where: `layers[${i}]`, message: `unknown layer kind "${kindName}"` });
      return;
    }
    const kind = layerKind(layer.kind);
    problems.push(...kind.validate(layer, width, `layers[${i}] (${layer.kind})`));
    width = kind.outputWidth(layer, width);
  });

  if (doc.labels && problems.every((p) => !p.where.startsWith('layers')) && doc.labels.length !== width) {
    problems.push({ where: 'labels', message: `has ${doc.labels.length} names, expected one per output (${width})` });
  }
  problems.push(...temperatureProblems(doc));
  if (problems.every((p) => !p.where.startsWith('layers'))) problems.push(...targetScalingProblems(doc), ...activationRangeProblems(doc));
  return problems;
}

function normalisationProblems(doc: ModelDoc): Problem[] {
  const n = doc.normalise;
  if (!n) return [];
  const where = `normalise (${n.method})`;
  const problems: Problem[] = [];
  const stats: [string, Float64Array | null][] =
    n.method === 'zscore'
      ? [
          ['mean', n.mean],
          ['std', n.std],
          ['m2', n.m2],
        ]
      : [
          ['min', n.min],
          ['max', n.max],
        ];
  for (const [name, data] of stats) {
    if (!data) continue;
    if (data.length !== doc.inputs) problems.push({ where, message: `${name} has ${data.length} values, expected one per input (${doc.inputs})` });
    else problems.push(...finiteProblems(data, name, where));
  }
  if (n.method === 'zscore' && n.std) {
    const i = n.std.findIndex((s) => s < 0);
    if (i >= 0) problems.push({ where, message: `std[${i}] is ${n.std[i]}; a standard deviation cannot be negative` });
  }
  if (n.method === 'minmax' && n.min && n.max && n.min.length === n.max.length) {
    const max = n.max;
    const i = n.min.findIndex((lo, k) => lo > max[k]);
    if (i >= 0) problems.push({ where, message: `min[${i}] = ${n.min[i]} is above max[${i}] = ${n.max[i]}` });
  }
  if (!(Number.isInteger(n.count) && n.count >= 0)) problems.push({ where, message: `count must be a non-negative integer, got ${n.count}` });
  return problems;
}

/**
 * The input width, then each layer's output width. Assumes a valid document.
 * @example modelWidths(doc) // [4, 16, 16, 3]
 */
export function modelWidths(doc: ModelDoc): number[] {
  const widths = [doc.inputs];
  for (const layer of doc.layers) widths.push(layerKind(layer.kind).outputWidth(layer, widths[widths.length - 1]));
  return widths;
}

/** Width of the model's output. */
export function outputWidth(doc: ModelDoc): number {
  const w = modelWidths(doc);
  return w[w.length - 1];
}
