/** A small seeded generator for invented test data (mulberry32); test-only, so tests never use Math.random. */
export function seededRng(seed: number): { next(): number } {
  let a = seed >>> 0;
  return {
    next() {
      a = (a + 0x6d2b79f5) >>> 0;
      let t = a;
      t = Math.imul(t ^ (t >>> 15), t | 1);
      t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
      return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
    },
  };
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
