/** A small seeded generator for invented test data (mulberry32); test-only, so tests never use Math.random. */
import { seededRandom } from '../fixtures/models.js';

export function seededRng(seed: number): { next(): number } {
  return { next: seededRandom(seed) };
}

/** Standard normal draws by Box–Muller. */
export function normals(rng: { next(): number }, n: number, mean = 0, std = 1): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const u = 1 - rng.next();
    const v = rng.next();
    out[i] = mean + std * Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  }
  return out;
}
