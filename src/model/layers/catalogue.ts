/** The one list of layer kinds. Adding one means a new file and a line here. */
import type { Layer, LayerKindName } from '../types.js';
import { batchnorm } from './batchnorm.js';
import { dense } from './dense.js';
import { dropout } from './dropout.js';
import type { LayerKind } from './kind.js';

type KindOf<L extends Layer> = LayerKind<L>;
type Catalogue = { [K in Layer['kind']]: KindOf<Extract<Layer, { kind: K }>> };

// Typed by every layer kind name: a missing entry is a compile error.
const CATALOGUE: Catalogue = { dense, batchnorm, dropout };

/**
 * The implementation of a layer kind, typed to accept layers of that kind.
 * @example layerKind(layer.kind).outputWidth(layer, 4)
 */
export function layerKind<K extends LayerKindName>(kind: K): LayerKind<Extract<Layer, { kind: K }>> {
  // One typed adapter: the record maps each kind to the LayerKind of exactly that layer type,
  // which TypeScript cannot correlate through an indexed access on a generic key.
  return CATALOGUE[kind] as LayerKind<Extract<Layer, { kind: K }>>;
}

/** Whether a string names a known layer kind (for documents read from untrusted bytes). */
export function isLayerKindName(kind: string): kind is LayerKindName {
  return Object.prototype.hasOwnProperty.call(CATALOGUE, kind);
}
