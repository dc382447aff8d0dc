/**
 * The facts about a model that `tendon about` prints and the HTTP endpoint's description route
 * serves: layers, shapes, parameter counts, normalisation, metadata, provenance.
 */
import { layerKind } from './layers/catalogue.js';
import type { ModelDoc } from './types.js';
import { modelWidths } from './validate.js';
import { denseLayerIndices } from './activation-ranges.js';

export interface ModelFacts {
  file: { path: string; bytes: number; checksum: string; formatVersion: string } | null;
  name: string;
  description: string;
  created: string;
  inputs: number;
  outputs: number;
  features: string[] | null;
  labels: string[] | null;
  /** Calibration temperature, or null when the model has none. */
  temperature: number | null;
  normalise: { method: string; fitted: boolean; rowsSeen: number } | null;
  /** Regression targets scaled inside the model: answer = last layer's output x std + mean. */
  targetScaling: { mean: number[]; std: number[] } | null;
  /** The int8 engine's stored input range of each dense layer (`shrink --calibrate`), or null. */
  activationRanges: { rows: number; layers: { layer: number; min: number; max: number }[] } | null;
  storage: string;
  parameters: number;
  layers: {
    index: number;
    kind: string;
    activation?: string;
    inputs: number;
    outputs: number;
    tensors: { name: string; shape: number[] }[];
    parameters: number;
    detail: string;
  }[];
  provenance: ModelDoc['provenance'];
  extra: Record<string, string>;
}

/**
 * True when the model's answers are classes: a softmax output, or one sigmoid unit (0 / 1).
 * Anything else answers values (regression), judged by how far they move, not by a top class.
 * @example outputsAreClasses(doc) // false for a linear output
 */
export function outputsAreClasses(doc: ModelDoc): boolean {
  const last = [...doc.layers].reverse().find((l) => l.kind === 'dense');
  return last?.kind === 'dense' && (last.activation === 'softmax' || (last.activation === 'sigmoid' && last.size === 1));
}

/** The facts `tendon about` prints; also served by the HTTP endpoint's description route. */
export function modelFacts(doc: ModelDoc, file: { path: string; checksum: string; bytes: number; version: string } | null): ModelFacts {
  const widths = modelWidths(doc);
  const layers = doc.layers.map((layer, i) => {
    const kind = layerKind(layer.kind);
    const tensors = kind.tensors(layer, widths[i], i).map((t) => ({ name: t.name, shape: [...t.shape] }));
    const trainable = kind.trainable(layer, widths[i], i).reduce((n, t) => n + t.data.length, 0);
    const detail = kind.describe(layer);
    return {
      index: i,
      kind: layer.kind,
      ...(layer.kind === 'dense' ? { activation: layer.activation } : {}),
      inputs: widths[i],
      outputs: widths[i + 1],
      tensors,
      parameters: trainable,
      detail,
    };
  });
  const norm = doc.normalise;
  return {
    file: file ? { path: file.path, bytes: file.bytes, checksum: file.checksum, formatVersion: file.version } : null,
    name: doc.meta.name,
    description: doc.meta.description,
    created: doc.meta.created,
    inputs: doc.inputs,
    outputs: widths[widths.length - 1],
    features: doc.features,
    labels: doc.labels,
    temperature: doc.temperature ?? null,
    normalise: norm ? { method: norm.method, fitted: norm.method === 'zscore' ? norm.mean !== null : norm.min !== null, rowsSeen: norm.count } : null,
    targetScaling: doc.targetScaling ? { mean: Array.from(doc.targetScaling.mean), std: Array.from(doc.targetScaling.std) } : null,
    activationRanges: doc.activationRanges
      ? {
          rows: doc.activationRanges.rows,
          layers: denseLayerIndices(doc.layers).map((layer, d) => ({ layer, min: doc.activationRanges!.min[d], max: doc.activationRanges!.max[d] })),
        }
      : null,
    storage: doc.storage,
    parameters: layers.reduce((n, l) => n + l.parameters, 0),
    layers,
    provenance: doc.provenance,
    extra: doc.meta.extra,
  };
}
