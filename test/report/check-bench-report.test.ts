/**
 * The check and bench pages read back with parse5 and @xmldom/xmldom: bars turned back into the
 * parity errors and the rows per second measured in the same run, the tolerance where it is.
 */
import { mkdtemp, readFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { benchBaselines, benchModel, denseStackDoc } from '../../src/bench/index.js';
import { parityReport, randomInputs } from '../../src/check/index.js';
import { openRunner, useEngine, type Runner } from '../../src/engine/index.js';
import { writeBenchReport, writeCheckReport } from '../../src/cli/report-files.js';
import { barChart } from '../../src/report/index.js';
import { byClass, htmlElements, htmlText, num, parseHtml, parseSvg, readAxis, svgsOfPage, ticksAreRound, type XmlElement } from './read-back.js';

let dir: string;
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-report-'));
});

/** Value at the end of each bar of `svg`, read through its own axis, keyed by group and series. */
function barValues(svg: XmlElement, log: boolean): Map<string, number> {
  const axis = readAxis(svg, 'x', log);
  return new Map(
    byClass(svg, 'bar').map((r) => [`${r.getAttribute('data-group')}|${r.getAttribute('data-series')}`, axis.invert(num(r, 'x') + num(r, 'width'))]),
  );
}

describe('check --report FILE.html', () => {
  it("draws each layer's largest error where the parity report puts it, and the tolerance as a line", async () => {
    const doc = denseStackDoc([6, 12, 3], 4, 'tanh', 'softmax');
    const report = parityReport(doc, randomInputs(doc, 64, 1), 64);
    const file = join(dir, 'check.html');
    await writeCheckReport(file, 'm.tendon', 'js', report, '(seeded random)');
    const { doc: page, errors } = parseHtml(await readFile(file, 'utf8'));
    expect(errors).toEqual([]);
    expect(htmlElements(page).some((e) => e.tagName === 'script')).toBe(false);
    const svgs = svgsOfPage(page);
    const abs = svgs.find((s) => byClass(s, 'chart-title')[0].textContent === 'Absolute error against the tolerance')!;
    const got = barValues(abs, true);
    const labels = [...report.layers.map((l) => `${l.index} ${l.kind}`), 'output'];
    const want = [...report.layers.map((l) => l.maxAbs), report.output.maxAbs];
    labels.forEach((label, i) => {
      if (want[i] > 0) expect(Math.abs(Math.log10(got.get(`${label}|max abs error`)!) - Math.log10(want[i]))).toBeLessThan(1e-3);
    });
    const axis = readAxis(abs, 'x', true);
    expect(
      ticksAreRound(
        axis.ticks.map((t) => t.value),
        true,
      ),
    ).toBe(true);
    const mark = byClass(abs, 'mark')[0].getElementsByTagName('line')[0] as unknown as XmlElement;
    expect(axis.invert(num(mark, 'x1'))).toBeCloseTo(report.tolerance.abs, 8);
    const verdict = htmlElements(page).find((e) => e.attrs.some((a) => a.name === 'class' && a.value.startsWith('verdict')))!;
    // The js engine on a small tanh stack is well inside float32 tolerance (see src/check/tolerance.ts).
    expect(report.pass).toBe(true);
    expect(htmlText(verdict)).toBe('PASS: every layer is within the tolerance.');
  });
});

describe('check --report FILE.html on a broken engine', () => {
  it('says FAIL, names the layer, and draws its bar past the tolerance line', async () => {
    const doc = denseStackDoc([6, 12, 3], 4, 'tanh', 'softmax');
    await useEngine('js');
    const inner = openRunner(doc, 'js');
    // A fault injected after the engine ran: layer 0's outputs all moved by 0.01.
    const broken: Runner = {
      engine: inner.engine,
      inputs: inner.inputs,
      outputs: inner.outputs,
      chunkRows: inner.chunkRows,
      run: (x: Float32Array, rows: number) => inner.run(x, rows),
      runLayers: (x: Float32Array, rows: number) => inner.runLayers(x, rows).map((l, i) => (i === 0 ? l.map((v) => v + 0.01) : l)),
      dispose: () => inner.dispose(),
    };
    const report = parityReport(doc, randomInputs(doc, 32, 1), 32, { runner: broken });
    inner.dispose();
    expect(report.pass).toBe(false);
    const file = join(dir, 'check-broken.html');
    await writeCheckReport(file, 'm.tendon', 'js', report, '(seeded random)');
    const { doc: page } = parseHtml(await readFile(file, 'utf8'));
    const verdict = htmlElements(page).find((e) => e.attrs.some((a) => a.name === 'class' && a.value === 'verdict fail'))!;
    expect(htmlText(verdict)).toBe('FAIL: 0 dense broke the tolerance.');
    const abs = svgsOfPage(page).find((s) => byClass(s, 'chart-title')[0].textContent === 'Absolute error against the tolerance')!;
    const got = barValues(abs, true).get('0 dense|max abs error')!;
    expect(got).toBeGreaterThan(report.tolerance.abs);
    expect(Math.abs(Math.log10(got) - Math.log10(report.layers[0].maxAbs))).toBeLessThan(1e-3);
  });
});

describe('bench --report FILE.html', () => {
  it('draws rows/s of the engine beside the baselines timed in the same run, each bar true to its measurement', async () => {
    const doc = denseStackDoc([8, 16, 4], 2, 'relu', 'softmax');
    const batches = [1, 64];
    const baselines = await benchBaselines(doc, { batches, minMs: 30 });
    const rows = await benchModel(doc, { batches, engine: 'js', minMs: 30 });
    const file = join(dir, 'bench.html');
    await writeBenchReport(file, 'm.tendon', rows, baselines);
    const { doc: page, errors } = parseHtml(await readFile(file, 'utf8'));
    expect(errors).toEqual([]);
    const chart = svgsOfPage(page)[0];
    const got = barValues(chart, true);
    expect(got.size).toBe(6);
    const close = (a: number, b: number) => expect(Math.abs(Math.log10(a) - Math.log10(b))).toBeLessThan(1e-3);
    for (const r of rows) close(got.get(`batch ${r.batch}|js engine`)!, r.rowsPerSec);
    for (const b of baselines.rows) close(got.get(`batch ${b.batch}|${b.name}`)!, b.rowsPerSec!);
    expect(
      ticksAreRound(
        readAxis(chart, 'x', true).ticks.map((t) => t.value),
        true,
      ),
    ).toBe(true);
    // The table gives the ratio of the engine to each baseline, from the same numbers.
    const cells = htmlElements(page)
      .filter((e) => e.tagName === 'th')
      .map(htmlText);
    expect(cells).toContain('js engine ÷ float64 reference');
  });
});

describe('barChart (the reusable horizontal bars, e.g. for attributions)', () => {
  it('puts negative values left of zero and positive ones right, on a linear axis with round ticks', () => {
    const svg = parseSvg(
      barChart({
        title: 'attribution',
        valueTitle: 'effect on the score',
        series: ['row 1'],
        groups: [
          { label: 'temp', values: [0.42] },
          { label: 'hour', values: [-0.13] },
        ],
      }),
    );
    const axis = readAxis(svg, 'x', false);
    expect(
      ticksAreRound(
        axis.ticks.map((t) => t.value),
        false,
      ),
    ).toBe(true);
    const zero = axis.ticks.find((t) => t.value === 0)!.pixel;
    const [temp, hour] = byClass(svg, 'bar');
    expect(num(temp, 'x')).toBeCloseTo(zero, 2);
    expect(axis.invert(num(temp, 'x') + num(temp, 'width'))).toBeCloseTo(0.42, 3);
    expect(num(hour, 'x') + num(hour, 'width')).toBeCloseTo(zero, 2);
    expect(axis.invert(num(hour, 'x'))).toBeCloseTo(-0.13, 3);
  });
});
