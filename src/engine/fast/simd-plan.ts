/** Which kernel operation runs each layer, asked of the layer's own kind (the catalogue). */
import { EngineRefusal } from '../../errors.js';
import { layerKind, type ModelDoc, type SimdInference } from '../../model/index.js';

/**
 * Each layer as the kernel's operations, from its own kind (the catalogue); the fast engine and
 * the shared-memory runner behind int8 (and fast on threads) run these and nothing else.
 * @throws EngineRefusal naming `engine`, the first layer it cannot run and its kind.
 */
export function simdInferencePlan(doc: ModelDoc, engine: 'fast' | 'int8' = 'fast'): SimdInference[] {
  return doc.layers.map((layer, i) => {
    const part = layerKind(layer.kind).simd.inference;
    if (typeof part !== 'function') throw new EngineRefusal(engine, i, layer.kind, `${part.refused}; open the model with --engine js or wasm`);
    return part(layer);
  });
}
