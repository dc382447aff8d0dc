/**
 * The protobuf payload as plain objects: the schema loaded at run time with protobufjs, the
 * shapes of its messages in TypeScript, and the enum codes. Field names are the .proto's own
 * (snake_case), so messages and FORMAT.md read the same.
 */
import { createRequire } from 'node:module';
import type protobuf from 'protobufjs';
import type { BuiltInStoredForms } from '../model/index.js';
import type { LayerKindName, StorageCodec } from '../model/types.js';
import { LAYER_ENTRY_MESSAGE, PAYLOAD_MESSAGE, TENDON_SCHEMA } from './schema.js';

// Activation enum codes live with each activation (its `code`, src/model/activations/); 0
// means "not set" and is refused.

/** Tensor dtype codes in the file. 0 means "not set" and is refused. */
export const DTYPE_CODES: Readonly<Record<StorageCodec, number>> = { f32: 1, f16: 2, i8: 3 };

/** Bytes per element for each dtype. */
export const DTYPE_BYTES: Readonly<Record<StorageCodec, number>> = { f32: 4, f16: 2, i8: 1 };

export interface RawTensor {
  dtype: number;
  shape: number[];
  data: Uint8Array;
  scales: number[];
}

/** One stored field of a layer message: a tensor, or a number (counts, rules, activation codes). */
export type RawField = RawTensor | number | null;

/** A layer's message typed by its kind's declared fields (src/model/layers/<kind>.ts): `proto` name -> value. */
type RawParams<S extends { readonly fields: readonly { readonly proto: string; readonly type: string }[] }> = {
  [F in S['fields'][number] as F['proto']]: F extends { readonly type: 'tensor' } ? RawTensor | null : number;
};

export interface RawLayerKind {
  /** Which member of the oneof is set (the oneof's names are the layer kind names); absent when none is. */
  kind?: LayerKindName;
}

/** One LayerEntry: the oneof's member for each kind, named by the kind. */
export type RawLayer = RawLayerKind & { [K in LayerKindName]?: RawParams<BuiltInStoredForms[K]> | null };

export interface RawZScore {
  mean: number[];
  std: number[];
  m2: number[];
  count: number;
}

export interface RawMinMax {
  min: number[];
  max: number[];
  count: number;
}

export interface RawInfo {
  name: string;
  description: string;
  created: string;
  extra: Record<string, string>;
}

export interface RawLineage {
  checksum: string;
  source: string;
  action: string;
  at: string;
}

export interface RawTargetScaling {
  mean: number[];
  std: number[];
}

export interface RawActivationRanges {
  min: number[];
  max: number[];
  rows: number;
}

export interface RawModel {
  inputs: number;
  feature_names: string[];
  output_labels: string[];
  input_scaling?: 'zscore' | 'minmax';
  zscore?: RawZScore | null;
  minmax?: RawMinMax | null;
  layers: RawLayer[];
  info: RawInfo | null;
  lineage: RawLineage[];
  /** 0 = no temperature (since 1.1). */
  temperature: number;
  /** Null (or absent) when the file has none; a file that sets it is written as 2.0. */
  target_scaling?: RawTargetScaling | null;
  /** Since 1.2; null (or absent) when the file has none. */
  activation_ranges?: RawActivationRanges | null;
}

let payloadType: protobuf.Type | null = null;
let schemaText = TENDON_SCHEMA;

/** The payload message type, parsed from the embedded schema once. */
export function payloadSchema(): protobuf.Type {
  if (payloadType === null) {
    // protobufjs is loaded here, with the first model read or written, not at import: a command
    // that touches no model file (`tendon --help`) does not pay for loading it.
    const protobufjs = createRequire(import.meta.url)('protobufjs') as typeof protobuf;
    // keepCase: field names stay as written in the .proto (running_mean, not runningMean).
    payloadType = protobufjs.parse(schemaText, { keepCase: true }).root.lookupType(PAYLOAD_MESSAGE);
  }
  return payloadType;
}

/** Whether the schema's LayerEntry has a member for a layer kind (a kind without one cannot be written). */
export function schemaHasLayerKind(kind: string): boolean {
  const entry = payloadSchema().root.lookupType(LAYER_ENTRY_MESSAGE);
  return entry.oneofs?.kind?.oneof.includes(kind) ?? false;
}

/**
 * Test hook: read and write payloads with another schema text, e.g. formats/tendon.proto with
 * the message of a layer kind a test registers (`registerLayerKind`). Returns the function that
 * goes back to the embedded schema.
 */
export function usePayloadSchema(text: string): () => void {
  schemaText = text;
  payloadType = null;
  return () => {
    schemaText = TENDON_SCHEMA;
    payloadType = null;
  };
}

/** Serialise a payload object. */
export function encodePayload(raw: RawModel): Uint8Array {
  const bytes = payloadSchema().encode(raw).finish();
  // protobufjs may hand back a Buffer over a shared pool; give callers a plain, owned array.
  return new Uint8Array(bytes);
}

/**
 * Parse payload bytes into plain objects; throws whatever protobufjs throws on malformed input.
 * Defaults are filled in, so every field is present; unknown fields (a newer minor) are skipped.
 */
export function decodePayload(bytes: Uint8Array): RawModel {
  const type = payloadSchema();
  const message = type.decode(bytes);
  // One typed adapter: protobufjs returns an untyped record shaped by the schema above.
  const raw: RawModel = type.toObject(message, {
    longs: Number,
    enums: Number,
    defaults: true,
    arrays: true,
    objects: true,
    oneofs: true,
  }) as RawModel;
  return raw;
}
