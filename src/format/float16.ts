/**
 * IEEE 754 binary32 <-> binary16 conversion over typed arrays. float32 -> float16 rounds to
 * nearest, ties to even, keeps signed zero, produces subnormals down to 2^-24, turns overflow
 * into infinity and keeps NaN a NaN (the top mantissa bits of its payload, quiet bit set).
 * float16 -> float32 is exact for every pattern.
 */

const f32 = new Float32Array(1);
const u32 = new Uint32Array(f32.buffer);

/**
 * The binary16 bit pattern nearest to a binary32 value. A double is first rounded to float32.
 *
 * @example
 * float16Bits(1) // 0x3c00
 */
export function float16Bits(value: number): number {
  f32[0] = value;
  return bitsToHalf(u32[0]);
}

function bitsToHalf(x: number): number {
  const sign = (x >>> 16) & 0x8000;
  const exp = (x >>> 23) & 0xff;
  const mant = x & 0x7fffff;
  if (exp === 0xff) {
    // Keep NaN a NaN even when its payload lives only in the low 13 bits.
    return mant === 0 ? sign | 0x7c00 : sign | 0x7e00 | (mant >>> 13);
  }
  const e = exp - 127 + 15;
  if (e >= 0x1f) return sign | 0x7c00;
  if (e <= 0) {
    // Result is subnormal (or zero): value / 2^-24, rounded. Below 2^-25 it rounds to zero.
    if (e < -10) return sign;
    const m = mant | 0x800000;
    const shift = 14 - e;
    let half = m >>> shift;
    const rest = m & ((1 << shift) - 1);
    const midpoint = 1 << (shift - 1);
    if (rest > midpoint || (rest === midpoint && (half & 1) === 1)) half++;
    // A carry out of the mantissa lands exactly on the smallest normal's bit pattern.
    return sign | half;
  }
  let h = sign | (e << 10) | (mant >>> 13);
  const rest = mant & 0x1fff;
  // Ties to even; a carry into the exponent is correct, up to 0x7c00 (infinity) on overflow.
  if (rest > 0x1000 || (rest === 0x1000 && (h & 1) === 1)) h++;
  return h;
}

function halfToBits(h: number): number {
  const sign = (h & 0x8000) << 16;
  const exp = (h >>> 10) & 0x1f;
  const mant = h & 0x3ff;
  if (exp === 0x1f) return (sign | 0x7f800000 | (mant << 13)) >>> 0;
  if (exp !== 0) return (sign | ((exp - 15 + 127) << 23) | (mant << 13)) >>> 0;
  if (mant === 0) return sign >>> 0;
  // Subnormal half: normalise into a float32 normal.
  let e = 127 - 15 + 1;
  let m = mant;
  while ((m & 0x400) === 0) {
    m <<= 1;
    e--;
  }
  return (sign | (e << 23) | ((m & 0x3ff) << 13)) >>> 0;
}

/**
 * The binary32 value of a binary16 bit pattern.
 *
 * @example
 * float16Value(0xc000) // -2
 */
export function float16Value(bits: number): number {
  u32[0] = halfToBits(bits & 0xffff);
  return f32[0];
}

/**
 * Convert float32 values to binary16 bit patterns.
 *
 * @example
 * toFloat16(new Float32Array([1, -2])) // Uint16Array [0x3c00, 0xc000]
 */
export function toFloat16(values: Float32Array): Uint16Array {
  const bits = new Uint32Array(values.buffer, values.byteOffset, values.length);
  const out = new Uint16Array(values.length);
  for (let i = 0; i < values.length; i++) out[i] = bitsToHalf(bits[i]);
  return out;
}

let widenTable: Uint32Array | null = null;

/**
 * Convert binary16 bit patterns to float32 values (exact). Works through bit patterns so NaN
 * payloads survive.
 *
 * @example
 * fromFloat16(new Uint16Array([0x7bff])) // Float32Array [65504]
 */
export function fromFloat16(halves: Uint16Array): Float32Array {
  // 65 536 patterns: a 256 KiB table beats per-element branching on large weight matrices.
  if (widenTable === null) {
    widenTable = new Uint32Array(65536);
    for (let h = 0; h < 65536; h++) widenTable[h] = halfToBits(h);
  }
  const out = new Float32Array(halves.length);
  const outBits = new Uint32Array(out.buffer);
  for (let i = 0; i < halves.length; i++) outBits[i] = widenTable[halves[i]];
  return out;
}

/** Largest finite binary16 value; anything that rounds beyond it becomes infinity. */
export const FLOAT16_MAX = 65504;
