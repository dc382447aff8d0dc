/**
 * A self-contained SVG report of a training run: loss per epoch (train and hold-out),
 * accuracy per epoch when the model classifies, and per-layer gradient norms on a log scale.
 * No scripts, fonts or links to anything outside the file.
 */

export interface ReportEpoch {
  readonly epoch: number;
  readonly trainLoss: number;
  readonly holdoutLoss: number | null;
  readonly trainAccuracy: number | null;
  readonly holdoutAccuracy: number | null;
  /** Gradient norm per layer index (averaged over the epoch's batches); layers without parameters absent. */
  readonly gradientNorms: ReadonlyMap<number, number> | Record<number, number>;
}

interface Series {
  readonly label: string;
  readonly colour: string;
  readonly points: readonly (readonly [number, number])[];
}

const WIDTH = 640;
const PANEL_HEIGHT = 220;
const MARGIN = { left: 64, right: 150, top: 28, bottom: 32 };
const COLOURS = ['#1f6fb4', '#e5801c', '#2c9c3c', '#c92a2a', '#7b4fb8', '#8c564b', '#d4489c', '#6b6b6b', '#a8a81f', '#17a2b0'];

function escapeXml(s: string): string {
  return s.replace(/[<>&"']/g, (c) => ({ '<': '&lt;', '>': '&gt;', '&': '&amp;', '"': '&quot;', "'": '&#39;' })[c]!);
}

function fmt(v: number): string {
  return Math.abs(v) >= 1e4 || (Math.abs(v) < 1e-2 && v !== 0) ? v.toExponential(1) : Number(v.toPrecision(3)).toString();
}

function panel(title: string, series: readonly Series[], top: number, logScale: boolean): string {
  const pts = series.flatMap((s) => s.points).filter(([, y]) => Number.isFinite(y) && (!logScale || y > 0));
  const innerW = WIDTH - MARGIN.left - MARGIN.right;
  const innerH = PANEL_HEIGHT - MARGIN.top - MARGIN.bottom;
  const parts: string[] = [`<g transform="translate(0,${top})">`];
  parts.push(`<text x="${MARGIN.left}" y="18" font-size="13" font-weight="bold">${escapeXml(title)}</text>`);
  parts.push(`<rect x="${MARGIN.left}" y="${MARGIN.top}" width="${innerW}" height="${innerH}" fill="none" stroke="#999"/>`);
  if (pts.length === 0) {
    parts.push(`<text x="${MARGIN.left + 8}" y="${MARGIN.top + 20}" font-size="11">no data</text></g>`);
    return parts.join('');
  }
  const tf = (y: number) => (logScale ? Math.log10(y) : y);
  const xs = pts.map((p) => p[0]);
  const ys = pts.map((p) => tf(p[1]));
  const x0 = Math.min(...xs);
  const x1 = Math.max(...xs, x0 + 1);
  let y0 = Math.min(...ys);
  let y1 = Math.max(...ys);
  if (y1 - y0 < 1e-12) {
    y0 -= 0.5;
    y1 += 0.5;
  }
  const px = (x: number) => MARGIN.left + ((x - x0) / (x1 - x0)) * innerW;
  const py = (y: number) => MARGIN.top + innerH - ((tf(y) - y0) / (y1 - y0)) * innerH;
  for (const [frac, anchor] of [[0, 'end'], [1, 'end']] as const) {
    const v = y0 + frac * (y1 - y0);
    const label = logScale ? fmt(Math.pow(10, v)) : fmt(v);
    const y = MARGIN.top + innerH - frac * innerH;
    parts.push(`<text x="${MARGIN.left - 6}" y="${y + 4}" font-size="10" text-anchor="${anchor}">${label}</text>`);
  }
  parts.push(`<text x="${MARGIN.left}" y="${PANEL_HEIGHT - 10}" font-size="10">epoch ${x0}</text>`);
  parts.push(`<text x="${MARGIN.left + innerW}" y="${PANEL_HEIGHT - 10}" font-size="10" text-anchor="end">epoch ${x1}</text>`);
  series.forEach((s, i) => {
    const good = s.points.filter(([, y]) => Number.isFinite(y) && (!logScale || y > 0));
    if (good.length > 0) {
      const d = good.map(([x, y], k) => `${k === 0 ? 'M' : 'L'}${px(x).toFixed(1)},${py(y).toFixed(1)}`).join(' ');
      parts.push(`<path d="${d}" fill="none" stroke="${s.colour}" stroke-width="1.6"/>`);
      for (const [x, y] of good) parts.push(`<circle cx="${px(x).toFixed(1)}" cy="${py(y).toFixed(1)}" r="2" fill="${s.colour}"/>`);
    }
    const ly = MARGIN.top + 12 + i * 15;
    parts.push(`<rect x="${WIDTH - MARGIN.right + 10}" y="${ly - 8}" width="10" height="10" fill="${s.colour}"/>`);
    parts.push(`<text x="${WIDTH - MARGIN.right + 24}" y="${ly + 1}" font-size="11">${escapeXml(s.label)}</text>`);
  });
  parts.push('</g>');
  return parts.join('');
}

function normsOf(e: ReportEpoch): [number, number][] {
  const n = e.gradientNorms;
  return n instanceof Map ? [...n.entries()] : Object.entries(n).map(([k, v]) => [Number(k), v as number]);
}

/**
 * The report as one SVG document (a string). Epochs are shown 1-based.
 *
 * @example writeFileSync('run.svg', renderReport('iris', history))
 */
export function renderReport(title: string, epochs: readonly ReportEpoch[], footnote?: string): string {
  const panels: string[] = [];
  const loss: Series[] = [
    { label: 'train loss', colour: COLOURS[0], points: epochs.map((e) => [e.epoch + 1, e.trainLoss]) },
  ];
  if (epochs.some((e) => e.holdoutLoss !== null)) {
    loss.push({ label: 'hold-out loss', colour: COLOURS[1], points: epochs.filter((e) => e.holdoutLoss !== null).map((e) => [e.epoch + 1, e.holdoutLoss!]) });
  }
  panels.push(panel('loss per epoch', loss, 0, false));
  if (epochs.some((e) => e.trainAccuracy !== null)) {
    const acc: Series[] = [
      { label: 'train accuracy', colour: COLOURS[0], points: epochs.filter((e) => e.trainAccuracy !== null).map((e) => [e.epoch + 1, e.trainAccuracy!]) },
    ];
    if (epochs.some((e) => e.holdoutAccuracy !== null)) {
      acc.push({ label: 'hold-out accuracy', colour: COLOURS[1], points: epochs.filter((e) => e.holdoutAccuracy !== null).map((e) => [e.epoch + 1, e.holdoutAccuracy!]) });
    }
    panels.push(panel('accuracy per epoch', acc, panels.length * PANEL_HEIGHT, false));
  }
  const layers = [...new Set(epochs.flatMap((e) => normsOf(e).map(([l]) => l)))].sort((a, b) => a - b);
  const normSeries: Series[] = layers.map((layer, i) => ({
    label: `layer ${layer}`,
    colour: COLOURS[i % COLOURS.length],
    points: epochs.flatMap((e) => normsOf(e).filter(([l]) => l === layer).map(([, v]) => [e.epoch + 1, v] as [number, number])),
  }));
  panels.push(panel('gradient norm per layer (log scale)', normSeries, panels.length * PANEL_HEIGHT, true));
  // A footnote (the calibration line of a calibrated run) gets a line of its own under the panels.
  const height = panels.length * PANEL_HEIGHT + 30 + (footnote ? 24 : 0);
  return [
    `<?xml version="1.0" encoding="UTF-8"?>`,
    `<svg xmlns="http://www.w3.org/2000/svg" width="${WIDTH}" height="${height}" viewBox="0 0 ${WIDTH} ${height}" font-family="sans-serif">`,
    `<rect width="100%" height="100%" fill="#fff"/>`,
    `<text x="${MARGIN.left}" y="20" font-size="15" font-weight="bold">${escapeXml(title)}</text>`,
    `<g transform="translate(0,30)">${panels.join('')}</g>`,
    ...(footnote ? [`<text x="${MARGIN.left}" y="${height - 8}" font-size="11">${escapeXml(footnote)}</text>`] : []),
    `</svg>`,
    '',
  ].join('\n');
}
