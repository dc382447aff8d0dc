/**
 * Axes: ticks at round values and the value <-> pixel transforms. Linear ticks step by 1, 2 or
 * 5 x 10^k ("nice numbers", Heckbert, Graphics Gems 1990); log ticks sit on powers of ten.
 */

/**
 * The round step (1, 2 or 5 x 10^k) that cuts `span` into about `target` pieces.
 * @example niceStep(0.83, 5) // 0.2
 */
export function niceStep(span: number, target = 5): number {
  if (!(span > 0) || !Number.isFinite(span)) return 1;
  const raw = span / Math.max(1, target);
  const k = Math.floor(Math.log10(raw));
  const f = raw / 10 ** k;
  // Thresholds at the geometric midpoints between 1, 2, 5 and 10 pick the nearest step.
  const nice = f < Math.SQRT2 ? 1 : f < Math.sqrt(10) ? 2 : f < Math.sqrt(50) ? 5 : 10;
  // Divide by 10^-k for negative k: 5 / 1e10 is the double nearest 5e-10, 5 * 1e-10 is not.
  return k < 0 ? nice / 10 ** -k : nice * 10 ** k;
}

/** A value with the float noise of k x step removed (0.30000000000000004 -> 0.3). */
function clean(v: number): number {
  return Number(v.toPrecision(12));
}

export interface Axis {
  /** The domain shown, from tick to tick. */
  readonly lo: number;
  readonly hi: number;
  readonly log: boolean;
  readonly ticks: readonly number[];
  /** Distance between linear ticks (NaN on a log axis). */
  readonly step: number;
  /** Pixel of a value (values at or below 0 on a log axis go to the low end). */
  toPixel(v: number): number;
}

export interface LinearAxisOptions {
  /** Values the axis must reach as well (0 for bars, 1 for shares). */
  readonly include?: readonly number[];
  /** About this many pieces between ticks. Default 5. */
  readonly target?: number;
  /** No step below this (1 for whole numbers such as epochs; keep it a nice number). */
  readonly minStep?: number;
}

/**
 * A linear axis covering `values` (and `include`), widened to whole ticks.
 * @example linearAxis([0.12, 0.93], 300, 20).ticks // [0, 0.2, 0.4, 0.6, 0.8, 1]
 */
export function linearAxis(values: readonly number[], pixelLo: number, pixelHi: number, opts: LinearAxisOptions = {}): Axis {
  const finite = [...values, ...(opts.include ?? [])].filter(Number.isFinite);
  let min = finite.length ? Math.min(...finite) : 0;
  let max = finite.length ? Math.max(...finite) : 1;
  if (max - min < 1e-12 * Math.max(1, Math.abs(max))) {
    // One value: a band around it one round step wide on each side.
    const pad = niceStep(Math.abs(max) || 1, 5);
    min -= pad;
    max += pad;
  }
  const step = Math.max(niceStep(max - min, opts.target ?? 5), opts.minStep ?? 0);
  const lo = clean(Math.floor(min / step + 1e-9) * step);
  const hi = clean(Math.ceil(max / step - 1e-9) * step);
  const ticks: number[] = [];
  for (let k = 0; lo + k * step <= hi + step * 1e-9; k++) ticks.push(clean(lo + k * step));
  return { lo, hi, log: false, ticks, step, toPixel: (v) => pixelLo + ((v - lo) / (hi - lo)) * (pixelHi - pixelLo) };
}

/**
 * A log axis over the positive `values`, from the power of ten below the smallest to the one
 * above the largest; ticks every decade (every second or third on long spans).
 * @example logAxis([3e-5, 0.4], 300, 20).ticks // [1e-5, 1e-4, 0.001, 0.01, 0.1, 1]
 */
export function logAxis(values: readonly number[], pixelLo: number, pixelHi: number, maxTicks = 8): Axis {
  const positive = values.filter((v) => v > 0 && Number.isFinite(v));
  // The slack absorbs log10's rounding at exact powers of ten (log10(1000) = 2.9999999999999996).
  let a = positive.length ? Math.floor(Math.log10(Math.min(...positive)) + 1e-12) : 0;
  let b = positive.length ? Math.ceil(Math.log10(Math.max(...positive)) - 1e-12) : 1;
  if (b <= a) b = a + 1;
  const every = Math.ceil((b - a + 1) / maxTicks);
  a = Math.floor(a / every) * every;
  b = Math.ceil(b / every) * every;
  const ticks: number[] = [];
  for (let k = a; k <= b; k += every) ticks.push(clean(10 ** k));
  const lo = clean(10 ** a);
  const hi = clean(10 ** b);
  return {
    lo,
    hi,
    log: true,
    ticks,
    step: Number.NaN,
    toPixel: (v) => pixelLo + ((Math.log10(Math.max(v, lo)) - a) / (b - a)) * (pixelHi - pixelLo),
  };
}

/**
 * A tick label people read and a program can parse back: plain decimals with as many places as
 * the step needs; k / M for thousands and millions; 1e-5 style far from 1; percent on request.
 * @example tickText(0.2, 0.2, false) // '0.2'; tickText(250000, 50000, false) // '250k'
 */
export function tickText(v: number, step: number, percent: boolean): string {
  if (percent) {
    const places = Number.isFinite(step) ? Math.max(0, -Math.floor(Math.log10(step * 100) + 1e-9)) : 0;
    return `${(v * 100).toFixed(places)}%`;
  }
  const a = Math.abs(v);
  if (v === 0) return '0';
  if (a >= 1e6 && a < 1e12) return `${clean(v / 1e6)}M`;
  if (a >= 1e4 && a < 1e6) return `${clean(v / 1e3)}k`;
  if (a < 1e-3 || a >= 1e12)
    return v
      .toExponential()
      .replace(/\.?0+e/, 'e')
      .replace('e+', 'e');
  if (Number.isFinite(step)) {
    const places = Math.max(0, -Math.floor(Math.log10(step) + 1e-9));
    return v.toFixed(places);
  }
  return String(clean(v));
}

/**
 * A measured value in a label: 3 significant digits, same forms as the ticks.
 * @example valueText(0.123456, false) // '0.123'
 */
export function valueText(v: number, percent: boolean): string {
  if (!Number.isFinite(v)) return Number.isNaN(v) ? 'NaN' : v > 0 ? '∞' : '-∞';
  if (percent) return `${clean(Number((v * 100).toPrecision(3)))}%`;
  const a = Math.abs(v);
  if (v === 0) return '0';
  if (a >= 1e6 && a < 1e12) return `${Number((v / 1e6).toPrecision(3))}M`;
  if (a >= 1e4 && a < 1e6) return `${Number((v / 1e3).toPrecision(3))}k`;
  if (a < 1e-3 || a >= 1e12) return v.toExponential(2).replace('e+', 'e');
  return String(Number(v.toPrecision(3)));
}
