/** The one list of layer kinds. Adding one means a new file and a line here. */
import type { Layer, LayerKindName } from '../types.js';
import { batchnorm } from './batchnorm.js';
import { dense } from './dense.js';
import { dropout } from './dropout.js';
import { widthAfter, type AnyStoredForm, type FieldValues } from './fields.js';
import type { AnyLayer, LayerKind } from './kind.js';

type KindOf<L extends Layer> = LayerKind<L>;
/** The built-in kinds, typed by every layer kind name: a missing entry is a compile error. */
export type LayerCatalogue = { [K in Layer['kind']]: KindOf<Extract<Layer, { kind: K }>> };

const BUILT_IN = { dense, batchnorm, dropout } satisfies LayerCatalogue;

/** Each built-in kind's stored form with its literal field names (format/payload.ts types the file's messages by them). */
export type BuiltInStoredForms = { [K in LayerKindName]: (typeof BUILT_IN)[K]['stored'] };

// The built-in kinds, and for the length of a test a kind it registers (`registerLayerKind`);
// `layerKind` is the one place that reads an entry back as its type.
const CATALOGUE = new Map<string, unknown>(Object.entries(BUILT_IN));

/**
 * The implementation of a layer kind, typed to accept layers of that kind.
 * @example layerKind(layer.kind).describe(layer)
 */
export function layerKind<K extends LayerKindName>(kind: K): LayerKind<Extract<Layer, { kind: K }>> {
  const found = CATALOGUE.get(kind);
  if (!found) throw new Error(`layerKind: no layer kind "${kind}" in the catalogue`);
  // One typed adapter: the map holds each kind's LayerKind for exactly that layer type, which
  // TypeScript cannot correlate through a lookup on a generic key.
  return found as unknown as LayerKind<Extract<Layer, { kind: K }>>;
}

/** Whether a string names a known layer kind (for documents read from untrusted bytes). */
export function isLayerKindName(kind: string): kind is LayerKindName {
  return CATALOGUE.has(kind);
}

/** Every layer kind name in the catalogue, in registration order (for messages). */
export function layerKindNames(): LayerKindName[] {
  return [...CATALOGUE.keys()] as LayerKindName[];
}

/** A kind's stored fields as the codec, the file check and the spec read them. */
export function storedForm(kind: LayerKindName): AnyStoredForm {
  return layerKind(kind).stored;
}

/**
 * Width of a layer's output for a given input width, by its kind's stored form.
 * @example layerOutputWidth({ kind: 'dropout', rate: 0.5 }, 4) // 4
 */
export function layerOutputWidth(layer: Layer, inputWidth: number): number {
  // One typed adapter: a layer read by the field name its kind declares.
  return widthAfter(storedForm(layer.kind), layer as unknown as FieldValues, inputWidth);
}

/**
 * Test hook: add a layer kind beyond the built-in ones for this process, to prove that the
 * catalogue alone carries a kind through the reference, the engines, the codec, the file check
 * and the spec. Returns its name, typed as a layer kind name, and a function that removes it.
 * Its file form is a message of its own in the LayerEntry oneof: a test supplies that piece of
 * schema with `usePayloadSchema` (format/payload.ts).
 * @throws Error when the name is already taken.
 */
export function registerLayerKind<L extends AnyLayer>(kind: LayerKind<L>): { name: LayerKindName; remove(): void } {
  if (CATALOGUE.has(kind.kind)) throw new Error(`registerLayerKind: "${kind.kind}" is already in the catalogue`);
  CATALOGUE.set(kind.kind, kind);
  return { name: kind.kind as LayerKindName, remove: () => void CATALOGUE.delete(kind.kind) };
}
