/**
 * tendon's visual language, written down in one place: every picture the reports draw takes
 * its colours, strokes, markers, type and spacing from here.
 *
 * How the series colours were chosen (not taken from any plotting library's palette): a greedy
 * max-min search over the sRGB cube in steps of 8, starting from our ink blue, keeping only
 * colours with a WCAG contrast of at least 4:1 against the white page (graphics need 3:1),
 * CIELAB lightness 30..60 and chroma 30..65 (calm, never neon), and at each step adding the
 * candidate whose smallest CIE76 distance to those already chosen, taken over normal vision
 * and the three dichromacies simulated with Machado et al. (2009), is largest; the results
 * were then rounded to tidy hex values. Every pair stays at least 20 ΔE apart for each kind of
 * vision (the test in test/report/look.test.ts holds the palette to that). Colour is never
 * the only cue: each series also has its own dash pattern and marker, so a greyscale print
 * still tells them apart.
 */
import { hexToRgb, readableOn, rgbToHex } from './colour.js';

/** Page and text. */
export const PAPER = '#ffffff';
export const INK = '#1c2430';
/** Secondary text (axis titles, notes): 7:1 or better on the page. */
export const MUTED = '#4e5866';
/** Axis lines and tick marks. */
export const AXIS = '#8b939e';
/** Grid lines: light, behind the data. */
export const GRID = '#e4e7ec';
/** Soft fill behind panels and table heads. */
export const WASH = '#f5f6f8';

/** The series colours, in the order they are handed out. */
export const SERIES_COLOURS = ['#2a4a7f', '#c06018', '#00856a', '#8068d0', '#703828', '#9870a0'] as const;

export type MarkerShape = 'circle' | 'square' | 'triangle' | 'diamond' | 'plus' | 'cross';

export interface SeriesStyle {
  readonly colour: string;
  /** SVG stroke-dasharray; '' = solid. */
  readonly dash: string;
  readonly marker: MarkerShape;
  /** Odd series get hollow markers: one more cue without colour. */
  readonly hollow: boolean;
}

/** Dash patterns and markers, paired with the colours; they cycle together. */
const DASHES = ['', '7 4', '2 3', '9 3 2 3', '4 2', '12 3'] as const;
const MARKERS: readonly MarkerShape[] = ['circle', 'square', 'triangle', 'diamond', 'plus', 'cross'];

/**
 * The style of the i-th series. Past six, colours repeat with the next dash pattern, so no two
 * of the first 36 series look the same.
 * @example seriesStyle(1) // { colour: '#c06018', dash: '7 4', marker: 'square', hollow: true }
 */
export function seriesStyle(i: number): SeriesStyle {
  const n = SERIES_COLOURS.length;
  const k = i + Math.floor(i / n);
  return { colour: SERIES_COLOURS[i % n], dash: DASHES[k % DASHES.length], marker: MARKERS[k % MARKERS.length], hollow: i % 2 === 1 };
}

/** Good / bad verdict colours; always paired with words ("within", "over"). */
export const GOOD = '#00856a';
export const BAD = '#b3261e';

/** Type: local fonts only (nothing fetched); sizes in px. */
export const FONT_FAMILY = 'system-ui, "DejaVu Sans", "Liberation Sans", Arial, sans-serif';
export const TYPE = { title: 14, label: 11, tick: 10, note: 10 } as const;

/** Chart geometry in px. */
export const CHART = {
  width: 640,
  height: 280,
  margin: { left: 64, right: 140, top: 48, bottom: 46 },
  lineWidth: 1.8,
  markerSize: 3.2,
  barHeight: 14,
  barGap: 4,
  groupGap: 12,
} as const;

/**
 * Heat map ramp, page-pale to ink blue. It steps over the middle lightness band, where neither
 * dark nor white text reaches 4.5:1: shares up to one half run from pale to mid-light (dark
 * counts), above one half from mid-dark to deep (white counts).
 */
const HEAT_STOPS = [
  ['#f2f5fa', '#94a7c7'],
  ['#48639a', '#1f3c6e'],
] as const;

/**
 * Fill of a heat-map cell at `share` in [0, 1], and the text colour that reads on it.
 * @example heatColour(0) // { fill: '#f2f5fa', text: INK }
 */
export function heatColour(share: number): { fill: string; text: string } {
  const t = Math.min(1, Math.max(0, share));
  const [from, to] = t <= 0.5 ? HEAT_STOPS[0] : HEAT_STOPS[1];
  const u = t <= 0.5 ? t / 0.5 : (t - 0.5) / 0.5;
  const a = hexToRgb(from);
  const b = hexToRgb(to);
  const fill = rgbToHex(a.map((v, i) => v + (b[i] - v) * u));
  return { fill, text: readableOn(fill, INK, PAPER) };
}

/** Escape text for SVG / HTML content and attribute values. */
export function escapeMarkup(s: string): string {
  return s.replace(/[<>&"']/g, (c) => ({ '<': '&lt;', '>': '&gt;', '&': '&amp;', '"': '&quot;', "'": '&#39;' })[c]!);
}

/** A number for an SVG attribute: two decimals at most, no trailing zeros. */
export function px(v: number): string {
  return String(Math.round(v * 100) / 100);
}

/** Approximate rendered width of a label (for layout only): 0.6 em per character. */
export function textWidth(text: string, size: number): number {
  return text.length * size * 0.6;
}
