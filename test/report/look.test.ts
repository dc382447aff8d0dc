/**
 * The look's promises, held: contrast on the page (WCAG 2.1), colours told apart by readers
 * with each kind of dichromacy (Machado et al. 2009 simulation), series told apart without
 * colour, and a palette that is not a plotting library's stock one.
 */
import { describe, expect, it } from 'vitest';
import { contrastRatio, deltaE, greyOf, relativeLuminance, seenWith, type Dichromacy } from '../../src/report/colour.js';
import { heatColour, INK, MUTED, PAPER, SERIES_COLOURS, seriesStyle } from '../../src/report/look.js';

const VISIONS: (Dichromacy | null)[] = [null, 'protanopia', 'deuteranopia', 'tritanopia'];

describe('colour arithmetic (src/report/colour.ts)', () => {
  it('contrast ratio is 21:1 for black on white and 1:1 for a colour on itself (WCAG 2.1 definition)', () => {
    expect(contrastRatio('#000000', '#ffffff')).toBeCloseTo(21, 10);
    expect(contrastRatio('#2a4a7f', '#2a4a7f')).toBe(1);
  });
  it('relative luminance of #808080 is 0.2159 (WCAG 2.1 formula worked by hand: ((128/255 + 0.055)/1.055)^2.4)', () => {
    expect(relativeLuminance('#808080')).toBeCloseTo(0.21586, 4);
  });
  it('the dichromacy simulation keeps white and black (each row of the Machado 2009 matrices sums to 1)', () => {
    for (const k of ['protanopia', 'deuteranopia', 'tritanopia'] as const) {
      expect(seenWith('#ffffff', k)).toBe('#ffffff');
      expect(seenWith('#000000', k)).toBe('#000000');
    }
  });
  it('red and green, far apart for normal vision, come close for a deuteranope (the case the simulation exists for)', () => {
    expect(deltaE('#d03030', '#30a030')).toBeGreaterThan(60);
    expect(deltaE(seenWith('#d03030', 'deuteranopia'), seenWith('#30a030', 'deuteranopia'))).toBeLessThan(deltaE('#d03030', '#30a030') / 3);
  });
});

describe('the palette (src/report/look.ts)', () => {
  it('every series colour has at least 4:1 contrast on the page (WCAG 2.1 SC 1.4.11 asks 3:1 for graphics)', () => {
    for (const c of SERIES_COLOURS) expect(contrastRatio(c, PAPER), c).toBeGreaterThanOrEqual(4);
  });
  it('text colours reach 4.5:1 on the page (WCAG 2.1 SC 1.4.3, AA body text)', () => {
    expect(contrastRatio(INK, PAPER)).toBeGreaterThanOrEqual(4.5);
    expect(contrastRatio(MUTED, PAPER)).toBeGreaterThanOrEqual(4.5);
  });
  it.each(VISIONS)('every pair of series colours stays >= 20 CIE76 ΔE apart for %s vision', (vision) => {
    const seen = SERIES_COLOURS.map((c) => (vision ? seenWith(c, vision) : c));
    for (let i = 0; i < seen.length; i++)
      for (let j = i + 1; j < seen.length; j++) expect(deltaE(seen[i], seen[j]), `${SERIES_COLOURS[i]} / ${SERIES_COLOURS[j]}`).toBeGreaterThanOrEqual(20);
  });
  it('the first two series (training and hold-out) differ in grey too', () => {
    expect(deltaE(greyOf(SERIES_COLOURS[0]), greyOf(SERIES_COLOURS[1]))).toBeGreaterThan(15);
  });
  it('is not the ten-colour category palette of a widely used plotting library (its hex values from memory), nor a nudge of it', () => {
    const stock = ['#1f77b4', '#ff7f0e', '#2ca02c', '#d62728', '#9467bd', '#8c564b', '#e377c2', '#7f7f7f', '#bcbd22', '#17becf'];
    const oldNudge = ['#1f6fb4', '#e5801c', '#2c9c3c', '#c92a2a'];
    for (const c of SERIES_COLOURS) for (const s of [...stock, ...oldNudge]) expect(deltaE(c, s), `${c} near ${s}`).toBeGreaterThan(10);
  });
  it('the first six series differ in dash pattern and in marker, so they read in greyscale', () => {
    const styles = [0, 1, 2, 3, 4, 5].map(seriesStyle);
    expect(new Set(styles.map((s) => s.dash)).size).toBe(6);
    expect(new Set(styles.map((s) => s.marker)).size).toBe(6);
    // Past six the colours repeat, but never with the same dash pattern.
    const keys = Array.from({ length: 36 }, (_, i) => seriesStyle(i)).map((s) => `${s.colour}|${s.dash}`);
    expect(new Set(keys).size).toBe(36);
  });
  it('heat-map counts stay readable on every cell (>= 4.5:1, WCAG 2.1 SC 1.4.3)', () => {
    for (let k = 0; k <= 20; k++) {
      const { fill, text } = heatColour(k / 20);
      expect(contrastRatio(fill, text), `share ${k / 20}`).toBeGreaterThanOrEqual(4.5);
    }
  });
});
