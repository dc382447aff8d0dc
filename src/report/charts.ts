/**
 * The three pictures the reports are made of, each a standalone <svg> element (inline in an
 * HTML page, or nested in an SVG file): a line chart over epochs, a horizontal bar chart, and
 * a heat map with counts. Numbers in, markup out; the look comes from look.ts.
 *
 * Elements carry class names (tick x / tick y, series, line, marker, bar, last, cell) so the
 * tests can read the pictures back and invert the axes.
 */
import {
  AXIS,
  CHART,
  escapeMarkup,
  FONT_FAMILY,
  GRID,
  heatColour,
  INK,
  MUTED,
  PAPER,
  px,
  seriesStyle,
  textWidth,
  TYPE,
  WASH,
  type MarkerShape,
  type SeriesStyle,
} from './look.js';
import { linearAxis, logAxis, tickText, valueText, type Axis } from './scale.js';

export interface LineSeries {
  readonly label: string;
  /** [x, y] pairs; non-finite y (and y <= 0 on a log axis) break the line. */
  readonly points: readonly (readonly [number, number])[];
}

export interface LineChartSpec {
  readonly title: string;
  readonly xTitle: string;
  readonly yTitle: string;
  readonly series: readonly LineSeries[];
  /** Log y axis (decades). */
  readonly log?: boolean;
  /** y values are shares in [0, 1], shown as percent. */
  readonly percent?: boolean;
  /** Values the y axis must reach (e.g. [0, 1] for shares). */
  readonly include?: readonly number[];
  /** Whole-number x (epochs): no tick between integers. */
  readonly integerX?: boolean;
  readonly width?: number;
  readonly height?: number;
}

function svgOpen(width: number, height: number, label: string): string {
  return (
    `<svg xmlns="http://www.w3.org/2000/svg" width="${px(width)}" height="${px(height)}" viewBox="0 0 ${px(width)} ${px(height)}" ` +
    `font-family="${escapeMarkup(FONT_FAMILY)}" role="img" aria-label="${escapeMarkup(label)}">` +
    `<title>${escapeMarkup(label)}</title>` +
    `<rect class="paper" width="${px(width)}" height="${px(height)}" fill="${PAPER}"/>`
  );
}

function text(x: number, y: number, content: string, attrs: Record<string, string | number> = {}): string {
  const extra = Object.entries(attrs)
    .map(([k, v]) => ` ${k}="${typeof v === 'number' ? px(v) : escapeMarkup(v)}"`)
    .join('');
  return `<text x="${px(x)}" y="${px(y)}"${extra}>${escapeMarkup(content)}</text>`;
}

/** A marker of `shape` centred on (x, y), as one path. */
export function markerPath(shape: MarkerShape, x: number, y: number, r: number, style: SeriesStyle, cls = 'marker'): string {
  let d: string;
  switch (shape) {
    case 'circle':
      d = `M${px(x - r)},${px(y)} a${px(r)},${px(r)} 0 1,0 ${px(2 * r)},0 a${px(r)},${px(r)} 0 1,0 ${px(-2 * r)},0 Z`;
      break;
    case 'square':
      d = `M${px(x - r)},${px(y - r)} h${px(2 * r)} v${px(2 * r)} h${px(-2 * r)} Z`;
      break;
    case 'triangle':
      d = `M${px(x)},${px(y - r * 1.2)} L${px(x + r * 1.15)},${px(y + r * 0.85)} L${px(x - r * 1.15)},${px(y + r * 0.85)} Z`;
      break;
    case 'diamond':
      d = `M${px(x)},${px(y - r * 1.3)} L${px(x + r * 1.3)},${px(y)} L${px(x)},${px(y + r * 1.3)} L${px(x - r * 1.3)},${px(y)} Z`;
      break;
    case 'plus':
      d = `M${px(x - r * 1.3)},${px(y)} h${px(2.6 * r)} M${px(x)},${px(y - r * 1.3)} v${px(2.6 * r)}`;
      break;
    case 'cross':
      d = `M${px(x - r)},${px(y - r)} L${px(x + r)},${px(y + r)} M${px(x - r)},${px(y + r)} L${px(x + r)},${px(y - r)}`;
      break;
  }
  const open = shape === 'plus' || shape === 'cross';
  const fill = open ? 'none' : style.hollow ? PAPER : style.colour;
  return `<path class="${cls}" d="${d}" fill="${fill}" stroke="${style.colour}" stroke-width="${open ? 1.8 : 1.2}"/>`;
}

/** Sample of a series' line and marker, for legends. */
function legendSample(x: number, y: number, style: SeriesStyle): string {
  return (
    `<line x1="${px(x)}" y1="${px(y)}" x2="${px(x + 26)}" y2="${px(y)}" stroke="${style.colour}" stroke-width="${CHART.lineWidth}"${style.dash ? ` stroke-dasharray="${style.dash}"` : ''}/>` +
    markerPath(style.marker, x + 13, y, CHART.markerSize, style, 'legend-marker')
  );
}

/** Legend items laid out left to right, wrapping; returns markup and the height used. */
function legend(
  labels: readonly string[],
  styleOf: (i: number) => SeriesStyle,
  left: number,
  top: number,
  maxWidth: number,
  sample = legendSample,
): { markup: string; height: number } {
  let x = left;
  let y = top;
  const parts: string[] = [];
  labels.forEach((label, i) => {
    const w = 34 + textWidth(label, TYPE.label) + 14;
    if (x > left && x + w > left + maxWidth) {
      x = left;
      y += 16;
    }
    parts.push(`<g class="legend-item">${sample(x, y, styleOf(i))}${text(x + 32, y + 4, label, { 'font-size': TYPE.label, fill: INK })}</g>`);
    x += w;
  });
  return { markup: `<g class="legend">${parts.join('')}</g>`, height: labels.length ? y - top + 16 : 0 };
}

/** Tick marks, labels and grid lines of a y axis (horizontal lines) or x axis (vertical). */
function axisMarkup(axis: Axis, which: 'x' | 'y', plot: { left: number; right: number; top: number; bottom: number }, percent: boolean, grid: boolean): string {
  const parts: string[] = [];
  for (const t of axis.ticks) {
    const p = axis.toPixel(t);
    const label = tickText(t, axis.step, percent);
    if (which === 'y') {
      parts.push(
        `<g class="tick y">` +
          (grid ? `<line class="grid" x1="${px(plot.left)}" y1="${px(p)}" x2="${px(plot.right)}" y2="${px(p)}" stroke="${GRID}" stroke-width="1"/>` : '') +
          `<line x1="${px(plot.left - 4)}" y1="${px(p)}" x2="${px(plot.left)}" y2="${px(p)}" stroke="${AXIS}"/>` +
          text(plot.left - 7, p + 3.5, label, { 'font-size': TYPE.tick, fill: MUTED, 'text-anchor': 'end' }) +
          `</g>`,
      );
    } else {
      parts.push(
        `<g class="tick x">` +
          (grid ? `<line class="grid" x1="${px(p)}" y1="${px(plot.top)}" x2="${px(p)}" y2="${px(plot.bottom)}" stroke="${GRID}" stroke-width="1"/>` : '') +
          `<line x1="${px(p)}" y1="${px(plot.bottom)}" x2="${px(p)}" y2="${px(plot.bottom + 4)}" stroke="${AXIS}"/>` +
          text(p, plot.bottom + 15, label, { 'font-size': TYPE.tick, fill: MUTED, 'text-anchor': 'middle' }) +
          `</g>`,
      );
    }
  }
  return parts.join('');
}

/** Spread label positions so no two are closer than `gap`, staying near their targets. */
function spread(targets: readonly number[], gap: number, lo: number, hi: number): number[] {
  const order = targets.map((t, i) => [t, i] as const).sort((a, b) => a[0] - b[0]);
  const placed: number[] = [];
  for (const [t] of order) placed.push(Math.max(t, placed.length ? placed[placed.length - 1] + gap : lo));
  // Push back up from the bottom edge if the stack overran it.
  for (let k = placed.length - 1; k >= 0; k--) {
    const limit = k === placed.length - 1 ? hi : placed[k + 1] - gap;
    if (placed[k] > limit) placed[k] = limit;
  }
  const out = new Array<number>(targets.length);
  order.forEach(([, i], k) => (out[i] = placed[k]));
  return out;
}

/**
 * A line chart: series over x with a linear or log y axis, round ticks, light grid, a legend
 * of line samples, and each series' last value written at its end.
 * @example lineChart({ title: 'loss per epoch', xTitle: 'epoch', yTitle: 'loss', series: [{ label: 'training', points: [[1, 0.9], [2, 0.5]] }] })
 */
export function lineChart(spec: LineChartSpec): string {
  const width = spec.width ?? CHART.width;
  const height = spec.height ?? CHART.height;
  const m = CHART.margin;
  const usable = (y: number) => Number.isFinite(y) && (!spec.log || y > 0);
  const styles = spec.series.map((_, i) => seriesStyle(i));
  const lg = legend(
    spec.series.map((s) => s.label),
    (i) => styles[i],
    m.left,
    36,
    width - m.left - 16,
  );
  // Room on the right for the longest "label value" written at the line ends.
  const endRoom = Math.min(240, Math.max(m.right, ...spec.series.map((s) => textWidth(`${s.label} -0.000e-00`, TYPE.label) + 16)));
  const plot = { left: m.left, right: width - endRoom, top: m.top + lg.height - 6, bottom: height - m.bottom + lg.height - 6 };
  const totalHeight = height + lg.height - 6;
  const parts: string[] = [svgOpen(width, totalHeight, spec.title)];
  parts.push(text(m.left, 20, spec.title, { 'font-size': TYPE.title, 'font-weight': 'bold', fill: INK, class: 'chart-title' }));
  parts.push(lg.markup);

  const xs = spec.series.flatMap((s) => s.points.map((p) => p[0])).filter(Number.isFinite);
  const ys = spec.series.flatMap((s) => s.points.map((p) => p[1])).filter(usable);
  if (ys.length === 0) {
    parts.push(text(plot.left, plot.top + 20, 'nothing to draw: no finite values', { 'font-size': TYPE.label, fill: MUTED }));
    parts.push('</svg>');
    return parts.join('');
  }
  const xAxis = linearAxis(xs, plot.left, plot.right, { minStep: spec.integerX ? 1 : 0, target: 6 });
  const yAxis = spec.log ? logAxis(ys, plot.bottom, plot.top) : linearAxis(ys, plot.bottom, plot.top, { include: spec.include, target: 5 });
  parts.push(
    `<rect class="plot" x="${px(plot.left)}" y="${px(plot.top)}" width="${px(plot.right - plot.left)}" height="${px(plot.bottom - plot.top)}" fill="${PAPER}"/>`,
  );
  parts.push(axisMarkup(yAxis, 'y', plot, !!spec.percent, true));
  parts.push(axisMarkup(xAxis, 'x', plot, false, false));
  parts.push(`<line x1="${px(plot.left)}" y1="${px(plot.bottom)}" x2="${px(plot.right)}" y2="${px(plot.bottom)}" stroke="${AXIS}"/>`);
  parts.push(`<line x1="${px(plot.left)}" y1="${px(plot.top)}" x2="${px(plot.left)}" y2="${px(plot.bottom)}" stroke="${AXIS}"/>`);
  parts.push(
    text((plot.left + plot.right) / 2, plot.bottom + 34, spec.xTitle, { 'font-size': TYPE.label, fill: MUTED, 'text-anchor': 'middle', class: 'axis-title x' }),
  );
  const yMid = (plot.top + plot.bottom) / 2;
  parts.push(
    text(16, yMid, spec.yTitle + (spec.log ? ' (log scale)' : ''), {
      'font-size': TYPE.label,
      fill: MUTED,
      'text-anchor': 'middle',
      transform: `rotate(-90 16 ${px(yMid)})`,
      class: 'axis-title y',
    }),
  );

  const ends: { y: number; text: string; style: SeriesStyle }[] = [];
  spec.series.forEach((s, i) => {
    const style = styles[i];
    const runs: string[] = [];
    let pen = false;
    const good: (readonly [number, number])[] = [];
    for (const p of s.points) {
      if (!usable(p[1]) || !Number.isFinite(p[0])) {
        pen = false;
        continue;
      }
      runs.push(`${pen ? 'L' : 'M'}${px(xAxis.toPixel(p[0]))},${px(yAxis.toPixel(p[1]))}`);
      pen = true;
      good.push(p);
    }
    const g: string[] = [`<g class="series" data-label="${escapeMarkup(s.label)}">`];
    if (runs.length)
      g.push(
        `<path class="line" d="${runs.join(' ')}" fill="none" stroke="${style.colour}" stroke-width="${CHART.lineWidth}" stroke-linejoin="round"${style.dash ? ` stroke-dasharray="${style.dash}"` : ''}/>`,
      );
    // Markers on at most ~12 points (shifted per series so they do not sit on each other), and the last.
    const every = Math.max(1, Math.ceil(good.length / 12));
    good.forEach((p, k) => {
      if ((k + i) % every === 0 || k === good.length - 1) g.push(markerPath(style.marker, xAxis.toPixel(p[0]), yAxis.toPixel(p[1]), CHART.markerSize, style));
    });
    g.push('</g>');
    parts.push(g.join(''));
    const last = good[good.length - 1];
    if (last) ends.push({ y: yAxis.toPixel(last[1]), text: `${s.label} ${valueText(last[1], !!spec.percent)}`, style });
  });
  const placed = spread(
    ends.map((e) => e.y),
    13,
    plot.top,
    plot.bottom + 8,
  );
  ends.forEach((e, k) => {
    parts.push(
      `<line x1="${px(plot.right + 2)}" y1="${px(e.y)}" x2="${px(plot.right + 8)}" y2="${px(placed[k])}" stroke="${e.style.colour}" stroke-width="1"/>`,
    );
    parts.push(text(plot.right + 11, placed[k] + 3.5, e.text, { 'font-size': TYPE.label, fill: INK, class: 'last' }));
  });
  parts.push('</svg>');
  return parts.join('');
}

export interface BarGroup {
  readonly label: string;
  /** One value per series; null = not measured (written as "not run"). */
  readonly values: readonly (number | null)[];
}

export interface BarChartSpec {
  readonly title: string;
  /** Title of the value axis. */
  readonly valueTitle: string;
  /** Series names (one bar per series in each group). */
  readonly series: readonly string[];
  readonly groups: readonly BarGroup[];
  /** Log value axis; bars start at the axis's low end. */
  readonly log?: boolean;
  /** Values are shares in [0, 1], shown as percent. */
  readonly percent?: boolean;
  /** Vertical reference lines (a tolerance, a baseline), labelled. */
  readonly marks?: readonly { readonly value: number; readonly label: string }[];
  /** Text for a missing value. Default "not run". */
  readonly missing?: string;
  readonly width?: number;
}

/** Solid fill for even series, hatched for odd ones: bars differ without colour too. */
function barFill(i: number, style: SeriesStyle, idBase: string): string {
  return i % 2 === 0 ? style.colour : `url(#${idBase}-${i})`;
}

/** Pattern ids unique per chart, so several charts can share one HTML page. */
function hatchBase(title: string): string {
  return (
    'hatch-' +
    title
      .toLowerCase()
      .replace(/[^a-z0-9]+/g, '-')
      .replace(/^-|-$/g, '')
  );
}

function hatchDefs(count: number, idBase: string): string {
  const defs: string[] = [];
  for (let i = 1; i < count; i += 2) {
    const c = seriesStyle(i).colour;
    defs.push(
      `<pattern id="${idBase}-${i}" width="5" height="5" patternUnits="userSpaceOnUse" patternTransform="rotate(45)">` +
        `<rect width="5" height="5" fill="${PAPER}"/><rect width="2.2" height="5" fill="${c}"/></pattern>`,
    );
  }
  return defs.length ? `<defs>${defs.join('')}</defs>` : '';
}

/**
 * A horizontal bar chart: groups (layers, classes, batch sizes, features) down the page, one
 * bar per series in each, values along a linear (signed: negative bars go left of 0) or log
 * axis, each bar labelled with its value. Reusable for any "how much per item" picture, such
 * as per-feature attributions.
 * @example barChart({ title: 'attribution', valueTitle: 'effect on the score', series: ['row 1'], groups: [{ label: 'temp', values: [0.4] }, { label: 'hour', values: [-0.1] }] })
 */
export function barChart(spec: BarChartSpec): string {
  const width = spec.width ?? CHART.width;
  const m = CHART.margin;
  const longest = Math.max(40, ...spec.groups.map((g) => textWidth(g.label, TYPE.label)));
  const left = Math.min(220, longest + 18);
  const styles = spec.series.map((_, i) => seriesStyle(i));
  const idBase = hatchBase(spec.title);
  const sample = (x: number, y: number, style: SeriesStyle) => {
    const i = styles.indexOf(style);
    return `<rect x="${px(x + 4)}" y="${px(y - 6)}" width="18" height="12" fill="${barFill(i, style, idBase)}" stroke="${style.colour}"/>`;
  };
  const lg = spec.series.length > 1 ? legend(spec.series, (i) => styles[i], left, 36, width - left - 16, sample) : { markup: '', height: 0 };
  const top = 40 + lg.height;
  const perGroup = spec.series.length * (CHART.barHeight + CHART.barGap) - CHART.barGap;
  const plotHeight = spec.groups.length * (perGroup + CHART.groupGap);
  const plot = { left, right: width - 90, top, bottom: top + plotHeight };
  const height = plot.bottom + m.bottom;
  const parts: string[] = [svgOpen(width, height, spec.title), hatchDefs(spec.series.length, idBase)];
  parts.push(text(left, 20, spec.title, { 'font-size': TYPE.title, 'font-weight': 'bold', fill: INK, class: 'chart-title' }));
  parts.push(lg.markup);

  const values = spec.groups.flatMap((g) => g.values.filter((v): v is number => v !== null && Number.isFinite(v)));
  const markValues = (spec.marks ?? []).map((mk) => mk.value);
  // On a log axis bars need a baseline below the smallest value: one decade under it, so the
  // smallest bar still has length and no mark sits on the edge.
  const positives = [...values, ...markValues].filter((v) => v > 0);
  const axis = spec.log
    ? logAxis([...values, ...markValues, ...(positives.length ? [Math.min(...positives) / 10] : [])], plot.left, plot.right)
    : linearAxis([...values, ...markValues], plot.left, plot.right, { include: [0, ...(spec.percent ? [1] : [])] });
  const zero = spec.log ? plot.left : axis.toPixel(0);
  parts.push(axisMarkup(axis, 'x', plot, !!spec.percent, true));
  parts.push(`<line x1="${px(zero)}" y1="${px(plot.top)}" x2="${px(zero)}" y2="${px(plot.bottom)}" stroke="${AXIS}"/>`);
  parts.push(
    text((plot.left + plot.right) / 2, plot.bottom + 34, spec.valueTitle + (spec.log ? ' (log scale)' : ''), {
      'font-size': TYPE.label,
      fill: MUTED,
      'text-anchor': 'middle',
      class: 'axis-title x',
    }),
  );

  spec.groups.forEach((g, gi) => {
    const gy = plot.top + CHART.groupGap / 2 + gi * (perGroup + CHART.groupGap);
    parts.push(text(plot.left - 8, gy + perGroup / 2 + 4, g.label, { 'font-size': TYPE.label, fill: INK, 'text-anchor': 'end', class: 'group' }));
    g.values.forEach((v, si) => {
      const y = gy + si * (CHART.barHeight + CHART.barGap);
      const style = styles[si];
      if (v === null || Number.isNaN(v)) {
        parts.push(
          text(zero + 4, y + CHART.barHeight - 3, v === null ? (spec.missing ?? 'not run') : 'NaN', {
            'font-size': TYPE.note,
            fill: MUTED,
            class: 'bar-missing',
          }),
        );
        return;
      }
      const end = !Number.isFinite(v) ? (v > 0 ? plot.right : plot.left) : spec.log && v <= 0 ? plot.left : axis.toPixel(v);
      const x0 = Math.min(zero, end);
      const w = Math.abs(end - zero);
      parts.push(
        `<rect class="bar" data-series="${escapeMarkup(spec.series[si] ?? '')}" data-group="${escapeMarkup(g.label)}" x="${px(x0)}" y="${px(y)}" width="${px(w)}" height="${CHART.barHeight}" fill="${barFill(si, style, idBase)}" stroke="${style.colour}" stroke-width="1"/>`,
      );
      const label = valueText(v, !!spec.percent);
      const right = end >= zero;
      parts.push(
        text(right ? end + 4 : end - 4, y + CHART.barHeight - 3, label, {
          'font-size': TYPE.note,
          fill: INK,
          'text-anchor': right ? 'start' : 'end',
          class: 'bar-value',
        }),
      );
    });
  });
  for (const mk of spec.marks ?? []) {
    const x = axis.toPixel(mk.value);
    parts.push(
      `<g class="mark"><line x1="${px(x)}" y1="${px(plot.top - 4)}" x2="${px(x)}" y2="${px(plot.bottom)}" stroke="${INK}" stroke-width="1.4" stroke-dasharray="5 3"/>` +
        text(x, plot.top - 8, `${mk.label} ${valueText(mk.value, !!spec.percent)}`, {
          'font-size': TYPE.note,
          fill: INK,
          'text-anchor': x < plot.left + 60 ? 'start' : x > plot.right - 60 ? 'end' : 'middle',
        }) +
        `</g>`,
    );
  }
  parts.push('</svg>');
  return parts.join('');
}

export interface HeatMapSpec {
  readonly title: string;
  /** Row and column names (the classes). */
  readonly labels: readonly string[];
  /** counts[row][column]. */
  readonly counts: readonly (readonly number[])[];
  readonly rowTitle: string;
  readonly columnTitle: string;
}

/**
 * A heat map of counts: darker = more, each cell with its count written on it, the diagonal
 * outlined.
 * @example heatMap({ title: 'confusion', labels: ['a', 'b'], counts: [[5, 1], [0, 4]], rowTitle: 'true class', columnTitle: 'predicted class' })
 */
export function heatMap(spec: HeatMapSpec): string {
  const n = spec.labels.length;
  const longest = Math.max(30, ...spec.labels.map((l) => textWidth(l, TYPE.label)));
  const cell = Math.max(18, Math.min(48, Math.floor(420 / Math.max(1, n))));
  const fontSize = Math.min(TYPE.label, cell * 0.4);
  // Column labels wider than a cell are set on a slant, with room above for them.
  const slant = longest * (fontSize / TYPE.label) > cell - 4;
  const columnRoom = slant ? Math.min(130, longest * 0.75) + 12 : 18;
  const left = 36 + Math.min(160, longest + 10);
  const top = 46 + columnRoom;
  const note = 'darker = more rows; the outlined diagonal = right answers';
  const width = Math.max(360, left + n * cell + 30, textWidth(note, TYPE.note) + 40);
  const height = top + n * cell + 40;
  const max = Math.max(1, ...spec.counts.flat());
  const parts: string[] = [svgOpen(width, height, spec.title)];
  parts.push(text(16, 20, spec.title, { 'font-size': TYPE.title, 'font-weight': 'bold', fill: INK, class: 'chart-title' }));
  parts.push(text(left + (n * cell) / 2, 40, spec.columnTitle, { 'font-size': TYPE.label, fill: MUTED, 'text-anchor': 'middle', class: 'axis-title x' }));
  const midY = top + (n * cell) / 2;
  parts.push(
    text(16, midY, spec.rowTitle, {
      'font-size': TYPE.label,
      fill: MUTED,
      'text-anchor': 'middle',
      transform: `rotate(-90 16 ${px(midY)})`,
      class: 'axis-title y',
    }),
  );
  spec.labels.forEach((label, c) => {
    const cx = left + c * cell + cell / 2;
    parts.push(
      slant
        ? text(cx, top - 6, label, {
            'font-size': fontSize,
            fill: INK,
            'text-anchor': 'start',
            transform: `rotate(-40 ${px(cx)} ${px(top - 6)})`,
            class: 'column-label',
          })
        : text(cx, top - 6, label, { 'font-size': fontSize, fill: INK, 'text-anchor': 'middle', class: 'column-label' }),
    );
    parts.push(text(left - 6, top + c * cell + cell / 2 + 4, label, { 'font-size': fontSize, fill: INK, 'text-anchor': 'end', class: 'row-label' }));
  });
  spec.counts.forEach((row, r) =>
    row.forEach((count, c) => {
      const { fill, text: ink } = heatColour(count / max);
      const x = left + c * cell;
      const y = top + r * cell;
      parts.push(
        `<g class="cell" data-row="${r}" data-column="${c}"><rect x="${px(x)}" y="${px(y)}" width="${cell}" height="${cell}" fill="${fill}" stroke="${r === c ? INK : PAPER}" stroke-width="${r === c ? 1.5 : 1}"/>` +
          text(x + cell / 2, y + cell / 2 + fontSize * 0.35, String(count), { 'font-size': fontSize, fill: ink, 'text-anchor': 'middle' }) +
          `</g>`,
      );
    }),
  );
  parts.push(`<rect x="${px(left)}" y="${px(top)}" width="${n * cell}" height="${n * cell}" fill="none" stroke="${AXIS}"/>`);
  parts.push(text(16, height - 14, note, { 'font-size': TYPE.note, fill: MUTED }));
  parts.push('</svg>');
  return parts.join('');
}

/** Stack standalone <svg> pictures into one SVG document (a file of its own). */
export function svgDocument(title: string, pictures: readonly string[], width = CHART.width, notes: readonly string[] = []): string {
  let y = 34;
  const placed: string[] = [];
  for (const p of pictures) {
    const h = Number(/height="([\d.]+)"/.exec(p)?.[1] ?? CHART.height);
    placed.push(p.replace('<svg ', `<svg x="0" y="${px(y)}" `));
    y += h + 8;
  }
  // Notes (such as a calibration result) get a line each under the pictures.
  for (const note of notes) {
    y += 18;
    placed.push(`<text x="${CHART.margin.left}" y="${px(y - 4)}" font-size="12" fill="${INK}">${escapeMarkup(note)}</text>`);
  }
  return [
    '<?xml version="1.0" encoding="UTF-8"?>',
    `<svg xmlns="http://www.w3.org/2000/svg" width="${width}" height="${px(y)}" viewBox="0 0 ${width} ${px(y)}" font-family="${escapeMarkup(FONT_FAMILY)}">`,
    `<title>${escapeMarkup(title)}</title>`,
    `<rect width="${width}" height="${px(y)}" fill="${WASH}"/>`,
    `<text x="${CHART.margin.left}" y="22" font-size="16" font-weight="bold" fill="${INK}">${escapeMarkup(title)}</text>`,
    ...placed,
    '</svg>',
    '',
  ].join('\n');
}
