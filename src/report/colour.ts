/**
 * Colour arithmetic behind the look: sRGB luminance and contrast (WCAG 2.x definitions),
 * CIELAB distance, and how a colour appears to dichromat readers. Used to choose the palette
 * and, in the tests, to hold it to its promises. Pure functions on '#rrggbb' strings.
 */

/** '#rrggbb' -> [r, g, b] in 0..1 (gamma-encoded sRGB). */
export function hexToRgb(hex: string): [number, number, number] {
  if (!/^#[0-9a-f]{6}$/i.test(hex)) throw new RangeError(`hexToRgb: expected #rrggbb, got "${hex}"`);
  return [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16) / 255) as [number, number, number];
}

/** [r, g, b] in 0..1 -> '#rrggbb' (clamped, rounded). */
export function rgbToHex(rgb: readonly number[]): string {
  return (
    '#' +
    rgb
      .map((v) =>
        Math.round(Math.min(1, Math.max(0, v)) * 255)
          .toString(16)
          .padStart(2, '0'),
      )
      .join('')
  );
}

/** sRGB transfer function, encoded -> linear light (IEC 61966-2-1). */
export function toLinear(c: number): number {
  return c <= 0.04045 ? c / 12.92 : ((c + 0.055) / 1.055) ** 2.4;
}

/** Linear light -> encoded sRGB. */
export function toEncoded(c: number): number {
  const v = Math.min(1, Math.max(0, c));
  return v <= 0.0031308 ? v * 12.92 : 1.055 * v ** (1 / 2.4) - 0.055;
}

/**
 * Relative luminance as WCAG 2.x defines it: 0 for black, 1 for white.
 * @example relativeLuminance('#ffffff') // 1
 */
export function relativeLuminance(hex: string): number {
  const [r, g, b] = hexToRgb(hex).map(toLinear);
  return 0.2126 * r + 0.7152 * g + 0.0722 * b;
}

/**
 * WCAG 2.x contrast ratio, 1 (none) to 21 (black on white).
 * @example contrastRatio('#000000', '#ffffff') // 21
 */
export function contrastRatio(a: string, b: string): number {
  const [hi, lo] = [relativeLuminance(a), relativeLuminance(b)].sort((x, y) => y - x);
  return (hi + 0.05) / (lo + 0.05);
}

/** Whichever of `dark` and `light` reads better on `fill`. */
export function readableOn(fill: string, dark: string, light: string): string {
  return contrastRatio(fill, dark) >= contrastRatio(fill, light) ? dark : light;
}

/** CIELAB (D65 white) of an sRGB colour. */
export function lab(hex: string): [number, number, number] {
  const [r, g, b] = hexToRgb(hex).map(toLinear);
  const x = (0.4124 * r + 0.3576 * g + 0.1805 * b) / 0.95047;
  const y = 0.2126 * r + 0.7152 * g + 0.0722 * b;
  const z = (0.0193 * r + 0.1192 * g + 0.9505 * b) / 1.08883;
  const f = (t: number) => (t > 216 / 24389 ? Math.cbrt(t) : ((24389 / 27) * t + 16) / 116);
  return [116 * f(y) - 16, 500 * (f(x) - f(y)), 200 * (f(y) - f(z))];
}

/** CIE76 colour difference (Euclidean in CIELAB); about 2.3 is just noticeable. */
export function deltaE(a: string, b: string): number {
  const p = lab(a);
  const q = lab(b);
  return Math.hypot(p[0] - q[0], p[1] - q[1], p[2] - q[2]);
}

export type Dichromacy = 'protanopia' | 'deuteranopia' | 'tritanopia';

/**
 * Machado, Oliveira & Fernandes (2009), "A physiologically-based model for simulation of color
 * vision deficiency", severity 1.0 matrices, applied to linear sRGB (the published table; the
 * same numbers are in the colorspacious / viscm sources).
 */
const MACHADO_2009: Record<Dichromacy, readonly (readonly number[])[]> = {
  protanopia: [
    [0.152286, 1.052583, -0.204868],
    [0.114503, 0.786281, 0.099216],
    [-0.003882, -0.048116, 1.051998],
  ],
  deuteranopia: [
    [0.367322, 0.860646, -0.227968],
    [0.280085, 0.672501, 0.047413],
    [-0.01182, 0.04294, 0.968881],
  ],
  tritanopia: [
    [1.255528, -0.076749, -0.178779],
    [-0.078411, 0.930809, 0.147602],
    [0.004733, 0.691367, 0.3039],
  ],
};

/**
 * How `hex` looks to a reader with the given dichromacy.
 * @example seenWith('#ff0000', 'deuteranopia')
 */
export function seenWith(hex: string, kind: Dichromacy): string {
  const lin = hexToRgb(hex).map(toLinear);
  return rgbToHex(MACHADO_2009[kind].map((row) => toEncoded(row[0] * lin[0] + row[1] * lin[1] + row[2] * lin[2])));
}

/** The grey a colour becomes when printed or shown without colour (same luminance). */
export function greyOf(hex: string): string {
  const g = toEncoded(relativeLuminance(hex));
  return rgbToHex([g, g, g]);
}
