/**
 * Streaming per-feature statistics: Welford's online mean and variance (Welford 1962; Knuth,
 * TAOCP vol. 2, 4.2.2) plus the smallest and largest value seen. One pass, constant memory,
 * and no catastrophic cancellation of E[x²] - E[x]² when the mean is large next to the spread.
 */
export class FeatureMoments {
  count = 0;
  readonly mean: Float64Array;
  /** Sum of squared deviations from the running mean. */
  readonly m2: Float64Array;
  readonly min: Float64Array;
  readonly max: Float64Array;

  constructor(readonly width: number) {
    this.mean = new Float64Array(width);
    this.m2 = new Float64Array(width);
    this.min = new Float64Array(width).fill(Infinity);
    this.max = new Float64Array(width).fill(-Infinity);
  }

  /**
   * Add `rows` rows of `x` (row-major, `width` values each).
   * @example const m = new FeatureMoments(2); m.add(Float32Array.of(1, 2, 3, 4), 2); m.mean // [2, 3]
   */
  add(x: ArrayLike<number>, rows: number): void {
    const w = this.width;
    for (let r = 0; r < rows; r++) {
      this.count++;
      const n = this.count;
      for (let c = 0; c < w; c++) {
        const v = x[r * w + c];
        const delta = v - this.mean[c];
        this.mean[c] += delta / n;
        this.m2[c] += delta * (v - this.mean[c]);
        if (v < this.min[c]) this.min[c] = v;
        if (v > this.max[c]) this.max[c] = v;
      }
    }
  }

  /** Population variance per feature (M2 / n; 0 before any row). */
  variance(): Float64Array {
    const v = new Float64Array(this.width);
    for (let c = 0; c < this.width; c++) v[c] = this.count > 0 ? this.m2[c] / this.count : 0;
    return v;
  }

  /** Population standard deviation of feature c (0 before two rows). */
  std(c: number): number {
    return this.count > 1 ? Math.sqrt(this.m2[c] / this.count) : 0;
  }

  reset(): void {
    this.count = 0;
    this.mean.fill(0);
    this.m2.fill(0);
    this.min.fill(Infinity);
    this.max.fill(-Infinity);
  }
}
