/**
 * Reading the report pictures back as a program would: SVG through @xmldom/xmldom (strict XML:
 * any well-formedness error fails the test), HTML through parse5 (the WHATWG parsing algorithm),
 * and the axes recovered from their own tick labels so plotted marks can be turned back into
 * numbers.
 */
import { DOMParser, type Element as XmlElement } from '@xmldom/xmldom';
import { parse, serializeOuter, type DefaultTreeAdapterMap } from 'parse5';

type Parse5Node = DefaultTreeAdapterMap['node'];
type Parse5Element = DefaultTreeAdapterMap['element'];

export type { XmlElement };

/** Parse SVG strictly; throws on any warning or error. */
export function parseSvg(markup: string): XmlElement {
  const problems: string[] = [];
  const doc = new DOMParser({ onError: (level: string, message: string) => void problems.push(`${level}: ${message}`) }).parseFromString(
    markup,
    'image/svg+xml',
  );
  if (problems.length) throw new Error(`SVG does not parse cleanly: ${problems.join('; ')}`);
  const root = doc.documentElement;
  if (!root || root.tagName !== 'svg') throw new Error('no <svg> root');
  return root as unknown as XmlElement;
}

/** Parse HTML with parse5; returns the document and every parse error it reported. */
export function parseHtml(markup: string): { doc: DefaultTreeAdapterMap['document']; errors: string[] } {
  const errors: string[] = [];
  const doc = parse(markup, { onParseError: (e) => errors.push(`${e.code} at line ${e.startLine}`) });
  return { doc, errors };
}

/** Every element under `node` (depth first). */
export function htmlElements(node: Parse5Node): Parse5Element[] {
  const out: Parse5Element[] = [];
  const walk = (n: Parse5Node) => {
    if ('tagName' in n) out.push(n as Parse5Element);
    const kids = 'childNodes' in n ? (n.childNodes as Parse5Node[]) : [];
    if (n.nodeName === 'template' && 'content' in n) walk((n as { content: Parse5Node }).content);
    for (const k of kids) walk(k);
  };
  walk(node);
  return out;
}

/** Text content of a parse5 node. */
export function htmlText(node: Parse5Node): string {
  if (node.nodeName === '#text') return (node as { value: string }).value;
  return 'childNodes' in node ? (node.childNodes as Parse5Node[]).map(htmlText).join('') : '';
}

/** The inline <svg> pictures of a parsed page, each re-parsed as strict XML. */
export function svgsOfPage(doc: DefaultTreeAdapterMap['document']): XmlElement[] {
  return htmlElements(doc)
    .filter((e) => e.tagName === 'svg')
    .map((e) => parseSvg(serializeOuter(e)));
}

export function byClass(root: XmlElement, cls: string): XmlElement[] {
  const out: XmlElement[] = [];
  const all = root.getElementsByTagName('*');
  for (let i = 0; i < all.length; i++) {
    const e = all[i] as unknown as XmlElement;
    if ((e.getAttribute('class') ?? '').split(/\s+/).includes(cls)) out.push(e);
  }
  return out;
}

export function num(e: XmlElement, attr: string): number {
  const v = e.getAttribute(attr);
  if (v === null) throw new Error(`<${e.tagName}> has no ${attr}`);
  return Number(v);
}

/** A tick or value label back to its number: "20%" -> 0.2, "250k" -> 250000, "1e-5" -> 0.00001. */
export function labelValue(text: string): number {
  const t = text.trim();
  if (t.endsWith('%')) return Number(t.slice(0, -1)) / 100;
  if (t.endsWith('k')) return Number(t.slice(0, -1)) * 1e3;
  if (t.endsWith('M')) return Number(t.slice(0, -1)) * 1e6;
  const v = Number(t);
  if (Number.isNaN(v)) throw new Error(`not a number label: "${text}"`);
  return v;
}

export interface ReadAxis {
  readonly ticks: { value: number; pixel: number }[];
  /** Pixel -> value, fitted from the first and last tick. */
  invert(pixel: number): number;
}

/**
 * The axis drawn as `g.tick.<which>` groups, recovered from tick positions and labels; on a log
 * axis the fit is made on log10 of the values. Throws when the ticks do not lie on one line.
 */
export function readAxis(svg: XmlElement, which: 'x' | 'y', log: boolean): ReadAxis {
  const ticks = byClass(svg, 'tick')
    .filter((g) => (g.getAttribute('class') ?? '').split(' ').includes(which))
    .map((g) => {
      const mark = Array.from(g.getElementsByTagName('line')).find((l) => l.getAttribute('class') !== 'grid')!;
      return { value: labelValue(g.getElementsByTagName('text')[0].textContent ?? ''), pixel: num(mark as unknown as XmlElement, which === 'y' ? 'y1' : 'x1') };
    });
  if (ticks.length < 2) throw new Error(`fewer than two ${which} ticks`);
  const f = (v: number) => (log ? Math.log10(v) : v);
  const a = ticks[0];
  const b = ticks[ticks.length - 1];
  const slope = (f(b.value) - f(a.value)) / (b.pixel - a.pixel);
  const invert = (p: number) => {
    const v = f(a.value) + (p - a.pixel) * slope;
    return log ? 10 ** v : v;
  };
  for (const t of ticks) {
    // Coordinates are written to 0.01 px: every tick must sit where the fit puts it, to 0.02 px.
    const expected = a.pixel + (f(t.value) - f(a.value)) / slope;
    if (Math.abs(expected - t.pixel) > 0.02) throw new Error(`${which} tick ${t.value} at ${t.pixel} px, off the axis line (${expected} px)`);
  }
  return { ticks, invert };
}

/** Vertices of an SVG path made of absolute M / L commands. */
export function pathPoints(d: string): [number, number][] {
  return [...d.matchAll(/[ML]\s*(-?[\d.]+),(-?[\d.]+)/g)].map((m) => [Number(m[1]), Number(m[2])]);
}

/** True for 1, 2 or 5 times a power of ten. */
export function isNiceStep(step: number): boolean {
  const k = Math.floor(Math.log10(step) + 1e-9);
  const m = step / 10 ** k;
  return [1, 2, 5, 10].some((n) => Math.abs(m - n) < 1e-6 * n);
}

/**
 * Ticks are round: a linear axis steps evenly by 1, 2 or 5 x 10^k and each tick is a whole
 * multiple of the step; a log axis sits on powers of ten.
 */
export function ticksAreRound(values: readonly number[], log: boolean): boolean {
  if (log) return values.every((v) => Math.abs(Math.log10(v) - Math.round(Math.log10(v))) < 1e-9);
  const measured = values[1] - values[0];
  if (!isNiceStep(measured)) return false;
  // The step as written (1, 2 or 5 x 10^k), free of the float noise of the subtraction.
  const k = Math.floor(Math.log10(measured) + 1e-9);
  const step = [1, 2, 5, 10].map((n) => n * 10 ** k).reduce((a, b) => (Math.abs(b - measured) < Math.abs(a - measured) ? b : a));
  return values.every((v, i) => {
    const q = v / step;
    return Math.abs(v - values[0] - i * step) < step * 1e-6 && Math.abs(q - Math.round(q)) < 1e-6 * Math.max(1, Math.abs(q));
  });
}
