/** Helpers for core tests: fixed-mask training contexts, random matrices (model builders: test/fixtures/models.ts). */
import type { ForwardContext } from '../../src/model/index.js';
import { SeededRng } from '../../src/model/index.js';

/** A seeded inverted-dropout context: the same (layer, rows, cols) call returns the same mask. */
export function trainingContext(seed: number): ForwardContext {
  const cache = new Map<string, Float32Array>();
  return {
    training: true,
    dropoutMask(layerIndex, rows, cols, rate) {
      const key = `${layerIndex}:${rows}:${cols}:${rate}`;
      let mask = cache.get(key);
      if (!mask) {
        const rng = new SeededRng(seed * 1000 + layerIndex);
        const keep = 1 / (1 - rate);
        mask = Float32Array.from({ length: rows * cols }, () => (rng.next() < rate ? 0 : keep));
        cache.set(key, mask);
      }
      return mask;
    },
  };
}

export function randomMatrix(rng: SeededRng, rows: number, cols: number, scale = 1): Float64Array {
  return Float64Array.from({ length: rows * cols }, () => scale * rng.normal());
}
