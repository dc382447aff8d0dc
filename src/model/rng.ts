/**
 * A small seeded pseudo-random generator: the same seed gives the same stream on every platform,
 * so shuffles, dropout masks, initial weights and invented test data are reproducible.
 */
import type { Rng } from './layers/kind.js';

/**
 * Seeded generator. State is one 32-bit counter advanced by the golden-ratio constant; each
 * output is that counter passed through an xor-shift-multiply mixer, which spreads every input
 * bit over the whole word, so nearby seeds give unrelated streams.
 * @example const rng = new SeededRng(42); rng.next(); rng.normal();
 */
export class SeededRng implements Rng {
  private state: number;
  private spare: number | null = null;

  constructor(seed: number) {
    // Mix the seed once so seeds 0, 1, 2... do not start from neighbouring counters.
    this.state = mix32(Math.trunc(seed) >>> 0) >>> 0;
  }

  /** A 32-bit unsigned integer. */
  nextUint32(): number {
    this.state = (this.state + 0x9e3779b9) >>> 0;
    return mix32(this.state) >>> 0;
  }

  /** Uniform in [0, 1), with 32 bits of resolution. */
  next(): number {
    return this.nextUint32() / 4294967296;
  }

  /** An integer uniform in [0, n). */
  below(n: number): number {
    return Math.floor(this.next() * n);
  }

  /**
   * Standard normal by the Box–Muller transform; the second value of each pair is kept for the
   * next call. 1 - next() lies in (0, 1], so the logarithm is finite.
   */
  normal(): number {
    if (this.spare !== null) {
      const s = this.spare;
      this.spare = null;
      return s;
    }
    const u = 1 - this.next();
    const v = this.next();
    const radius = Math.sqrt(-2 * Math.log(u));
    this.spare = radius * Math.sin(2 * Math.PI * v);
    return radius * Math.cos(2 * Math.PI * v);
  }
}

function mix32(x: number): number {
  let z = x;
  z = Math.imul(z ^ (z >>> 16), 0x7feb352d);
  z = Math.imul(z ^ (z >>> 15), 0x846ca68b);
  return z ^ (z >>> 16);
}

/**
 * A uniformly random permutation of 0..n-1 (Fisher–Yates: walk down, swap each slot with a
 * uniformly chosen slot at or below it).
 * @example fisherYates(5, new SeededRng(1)) // e.g. Uint32Array [3, 0, 4, 1, 2]
 */
export function fisherYates(n: number, rng: Rng): Uint32Array {
  const p = new Uint32Array(n);
  for (let i = 0; i < n; i++) p[i] = i;
  for (let i = n - 1; i > 0; i--) {
    const j = Math.floor(rng.next() * (i + 1));
    const t = p[i];
    p[i] = p[j];
    p[j] = t;
  }
  return p;
}
