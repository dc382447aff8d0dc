/**
 * ModelDoc <-> file bytes (header + protobuf payload).
 *
 * Each layer is written by its kind's declared fields (`stored` in src/model/layers/<kind>.ts);
 * no kind is named here. Storage: `doc.storage` chooses how tensors declared with 'model' storage
 * (dense weights) are stored (f32, f16 or i8 per column); the others (biases, batch-normalisation
 * vectors) and the normalisation statistics are always written at full precision (f32 /
 * float64): they are small, and rounding them shifts every output.
 */
import { ModelFileError, type Problem } from '../errors.js';
import { activationCode, activationRangeProblems, fieldShape, storedForm, type AnyField, type FieldValues } from '../model/index.js';
import type { Layer, ModelDoc, StorageCodec } from '../model/types.js';
import { checkPayload } from './check.js';
import { crcHex } from './crc32.js';
import { frame, openFrame, type FormatVersion } from './header.js';
import { decodePayload, encodePayload, schemaHasLayerKind, type RawField, type RawLayer, type RawModel, type RawTensor } from './payload.js';
import { encodeTensor } from './tensor.js';

function tensorOrProblems(values: Float32Array, shape: readonly number[], codec: StorageCodec, where: string, problems: Problem[]): RawTensor | null {
  const result = encodeTensor(values, shape, codec, where);
  if (Array.isArray(result)) {
    problems.push(...result);
    return null;
  }
  return result;
}

/** A tensor field's file form: its declared shape (the incoming width from the value count), in its storage codec. */
function encodeField(field: AnyField & { type: 'tensor' }, values: FieldValues, storage: StorageCodec, where: string, problems: Problem[]): RawTensor | null {
  const data = values[field.key] as Float32Array;
  const counts = field.shape.filter((dim) => dim !== 'in');
  const known = counts.reduce((n, dim) => n * (values[dim] as number), 1);
  const inWidth = field.shape.includes('in') ? data.length / known : 0;
  if (!Number.isInteger(inWidth)) {
    problems.push({ where, message: `${data.length} values do not divide into ${known} columns (${counts.join(' x ')})` });
    return null;
  }
  const shape = fieldShape(field, values, inWidth);
  if (shape === null) return null;
  return tensorOrProblems(data, shape, field.storage === 'model' ? storage : 'f32', where, problems);
}

/** A layer's LayerEntry: the member named by its kind, each declared field under its proto name. */
function encodeLayer(layer: Layer, index: number, storage: StorageCodec, problems: Problem[]): RawLayer {
  const where = `layers[${index}].${layer.kind}`;
  if (!schemaHasLayerKind(layer.kind)) {
    // protobufjs would drop the member silently and write an entry with no kind.
    problems.push({ where: `layers[${index}]`, message: `the file format has no message for layer kind "${layer.kind}" (formats/tendon.proto, LayerEntry)` });
    return {};
  }
  // One typed adapter: the layer read by the field names its kind declares.
  const values = layer as unknown as FieldValues;
  const params: Record<string, RawField> = {};
  for (const field of storedForm(layer.kind).fields) {
    const at = `${where}.${field.proto}`;
    switch (field.type) {
      case 'count':
      case 'number':
        params[field.proto] = values[field.key] as number;
        break;
      case 'activation': {
        const code = activationCode(values[field.key]);
        if (code === undefined) problems.push({ where: at, message: `unknown activation "${String(values[field.key])}"` });
        params[field.proto] = code ?? 0;
        break;
      }
      case 'tensor':
        params[field.proto] = encodeField(field, values, storage, at, problems);
        break;
      default:
        throw new Error(`encodeLayer: unknown field type ${String(field satisfies never)}`);
    }
  }
  return { [layer.kind]: params };
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
