/**
 * ModelDoc <-> file bytes (header + protobuf payload).
 *
 * Storage: `doc.storage` chooses how dense weights are stored (f32, f16 or i8 per column);
 * biases, batch-normalisation vectors and normalisation statistics are always written at full
 * precision (f32 / float64): they are small, and rounding them shifts every output.
 */
import { ModelFileError, type Problem } from '../errors.js';
import { activationKind, activationRangeProblems, isActivationName } from '../model/index.js';
import type { Layer, ModelDoc, StorageCodec } from '../model/types.js';
import { checkPayload } from './check.js';
import { crcHex } from './crc32.js';
import { frame, openFrame, type FormatVersion } from './header.js';
import { decodePayload, encodePayload, type RawLayer, type RawModel, type RawTensor } from './payload.js';
import { encodeTensor } from './tensor.js';

function tensorOrProblems(values: Float32Array, shape: readonly number[], codec: StorageCodec, where: string, problems: Problem[]): RawTensor | null {
  const result = encodeTensor(values, shape, codec, where);
  if (Array.isArray(result)) {
    problems.push(...result);
    return null;
  }
  return result;
}

function encodeLayer(layer: Layer, index: number, storage: StorageCodec, problems: Problem[]): RawLayer {
  const where = `layers[${index}].${layer.kind}`;
  switch (layer.kind) {
    case 'dense': {
      const rows = layer.size > 0 ? layer.weight.length / layer.size : NaN;
      if (!Number.isInteger(rows)) {
        problems.push({ where: `${where}.weight`, message: `${layer.weight.length} values do not divide into ${layer.size} columns (size)` });
      }
      const activation = isActivationName(layer.activation) ? activationKind(layer.activation).code : undefined;
      if (activation === undefined) {
        problems.push({ where: `${where}.activation`, message: `unknown activation "${layer.activation}"` });
      }
      return {
        dense: {
          size: layer.size,
          activation: activation ?? 0,
          alpha: layer.alpha,
          weight: Number.isInteger(rows) ? tensorOrProblems(layer.weight, [rows, layer.size], storage, `${where}.weight`, problems) : null,
          bias: tensorOrProblems(layer.bias, [layer.bias.length], 'f32', `${where}.bias`, problems),
        },
      };
    }
    case 'batchnorm': {
      const vector = (values: Float32Array, name: string): RawTensor | null => tensorOrProblems(values, [values.length], 'f32', `${where}.${name}`, problems);
      return {
        batchnorm: {
          gamma: vector(layer.gamma, 'gamma'),
          beta: vector(layer.beta, 'beta'),
          running_mean: vector(layer.runningMean, 'running_mean'),
          running_variance: vector(layer.runningVariance, 'running_variance'),
          epsilon: layer.epsilon,
          momentum: layer.momentum,
        },
      };
    }
    case 'dropout':
      return { dropout: { rate: layer.rate } };
  }
}

function orEmpty(values: Float64Array | null): number[] {
  return values === null ? [] : Array.from(values);
}

/** The payload object for a document; problems collects what cannot be written faithfully. */
export function toPayload(doc: ModelDoc, problems: Problem[]): RawModel {
  const raw: RawModel = {
    inputs: doc.inputs,
    feature_names: doc.features ?? [],
    output_labels: doc.labels ?? [],
    layers: doc.layers.map((layer, i) => encodeLayer(layer, i, doc.storage, problems)),
    info: {
      name: doc.meta.name,
      description: doc.meta.description,
      created: doc.meta.created,
      // Sorted keys: the same document always gives the same bytes, hence the same checksum.
      extra: Object.fromEntries(Object.entries(doc.meta.extra).sort(([a], [b]) => (a < b ? -1 : a > b ? 1 : 0))),
    },
    lineage: doc.provenance.map((p) => ({ checksum: p.checksum, source: p.source, action: p.action, at: p.at })),
    temperature: doc.temperature ?? 0,
  };
  if (doc.temperature !== undefined && !(Number.isFinite(doc.temperature) && doc.temperature > 0)) {
    problems.push({ where: 'temperature', message: `must be a finite number > 0, got ${doc.temperature}` });
  }
  if (doc.targetScaling) raw.target_scaling = { mean: Array.from(doc.targetScaling.mean), std: Array.from(doc.targetScaling.std) };
  if (doc.activationRanges) {
    const r = doc.activationRanges;
    raw.activation_ranges = { min: Array.from(r.min), max: Array.from(r.max), rows: r.rows };
    problems.push(...activationRangeProblems(doc));
  }
  const norm = doc.normalise;
  if (norm?.method === 'zscore') {
    raw.zscore = { mean: orEmpty(norm.mean), std: orEmpty(norm.std), m2: orEmpty(norm.m2), count: norm.count };
  } else if (norm?.method === 'minmax') {
    raw.minmax = { min: orEmpty(norm.min), max: orEmpty(norm.max), count: norm.count };
  }
  return raw;
}

/**
 * Encode a model document as file bytes (16-byte header + protobuf payload).
 * Throws ModelFileError (naming `label`) when a tensor cannot be stored faithfully: non-finite
 * values, values beyond the float16 range with f16 storage, or a weight that does not fit size.
 *
 * @example
 * const bytes = encodeModel(doc);
 * const { doc: again } = decodeModel(bytes, 'memory');
 */
export function encodeModel(doc: ModelDoc, label = '(model being written)'): Uint8Array {
  const problems: Problem[] = [];
  const raw = toPayload(doc, problems);
  if (problems.length > 0) throw new ModelFileError(label, problems);
  return frame(encodePayload(raw), versionFor(raw));
}

/**
 * The lowest version that holds the payload (FORMAT.md, section 6). A target scaling makes it
 * 2.0: a 1.x reader would skip that field and answer in scaled units, so it must refuse the
 * file instead. Fields a reader may skip and still answer correctly raise only the minor.
 */
export function versionFor(raw: RawModel): FormatVersion {
  if (raw.target_scaling) return { major: 2, minor: 0 };
  if (raw.activation_ranges) return { major: 1, minor: 2 };
  return { major: 1, minor: raw.temperature !== 0 ? 1 : 0 };
}

export interface DecodedModel {
  readonly doc: ModelDoc;
  /** CRC-32 of the payload, 8 lowercase hex digits. */
  readonly checksum: string;
  readonly version: FormatVersion;
}

/**
 * Decode and fully check file bytes. Nothing is returned unless every check passes; otherwise
 * one ModelFileError lists every problem found (header and integrity problems stop early,
 * because later checks would read garbage).
 *
 * @example
 * const { doc, checksum } = decodeModel(bytes, 'models/score.tdn');
 */
export function decodeModel(bytes: Uint8Array, path: string): DecodedModel {
  const framed = openFrame(bytes);
  if (!('payload' in framed)) throw new ModelFileError(path, [framed]);
  let raw: RawModel;
  try {
    raw = decodePayload(framed.payload);
  } catch (error) {
    const detail = error instanceof Error ? error.message : String(error);
    throw new ModelFileError(path, [{ where: 'payload', message: `not a valid protobuf TendonModel message (${detail})` }]);
  }
  const { doc, problems } = checkPayload(raw);
  if (doc === null) throw new ModelFileError(path, problems);
  return { doc, checksum: crcHex(framed.header.crc), version: framed.header.version };
}
