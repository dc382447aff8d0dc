/**
 * The HTML page the reports share: one file, inline CSS and inline SVG, no scripts, no fonts or
 * anything else from outside (a content-security policy in the page says so to the browser).
 */
import { AXIS, BAD, escapeMarkup, FONT_FAMILY, GOOD, GRID, INK, MUTED, PAPER, SERIES_COLOURS, WASH } from './look.js';

export interface PageSection {
  readonly heading: string;
  /** Plain words under the heading (escaped). */
  readonly intro?: string;
  /** Markup: pictures, tables, lists. */
  readonly body: string;
}

export interface PageSpec {
  readonly title: string;
  /** One sentence under the title (escaped). */
  readonly lead?: string;
  /** Label / value pairs shown as a small table at the top (escaped). */
  readonly facts?: readonly (readonly [string, string])[];
  readonly sections: readonly PageSection[];
}

const STYLE = `
*{box-sizing:border-box}
body{margin:0;background:${WASH};color:${INK};font-family:${FONT_FAMILY};font-size:15px;line-height:1.45}
main{max-width:720px;margin:0 auto;padding:24px 16px 48px}
h1{font-size:22px;margin:0 0 4px}
h2{font-size:17px;margin:0 0 8px}
p.lead{color:${MUTED};margin:0 0 16px}
section{background:${PAPER};border:1px solid ${GRID};border-radius:6px;padding:16px;margin:0 0 16px}
section>p{margin:0 0 10px}
svg{display:block;max-width:100%;height:auto;margin:8px 0}
table{border-collapse:collapse;font-size:13px;margin:8px 0}
th,td{padding:3px 10px;border-bottom:1px solid ${GRID};text-align:left;vertical-align:top}
th{background:${WASH};font-weight:600}
td.num{text-align:right;font-variant-numeric:tabular-nums}
table.facts th{background:none;font-weight:normal;color:${MUTED}}
ul.findings{list-style:none;padding:0;margin:0}
ul.findings li{border-left:4px solid ${SERIES_COLOURS[1]};background:${WASH};padding:8px 12px;margin:0 0 8px}
ul.findings li.fine{border-left-color:${GOOD}}
ul.findings li strong{display:block}
.verdict{font-weight:700}
.verdict.pass{color:${GOOD}}
.verdict.fail{color:${BAD}}
.note{color:${MUTED};font-size:13px}
footer{color:${MUTED};font-size:12px;border-top:1px solid ${AXIS};padding-top:8px}
`;

/** A table; cells are escaped; columns in `numeric` are right-aligned. */
export function htmlTable(head: readonly string[], rows: readonly (readonly string[])[], numeric: readonly number[] = []): string {
  const cell = (tag: 'th' | 'td', c: string, i: number) => `<${tag}${tag === 'td' && numeric.includes(i) ? ' class="num"' : ''}>${escapeMarkup(c)}</${tag}>`;
  return `<table><thead><tr>${head.map((h, i) => cell('th', h, i)).join('')}</tr></thead><tbody>${rows.map((r) => `<tr>${r.map((c, i) => cell('td', c, i)).join('')}</tr>`).join('')}</tbody></table>`;
}

/** A paragraph of plain words. */
export function para(words: string, cls?: string): string {
  return `<p${cls ? ` class="${cls}"` : ''}>${escapeMarkup(words)}</p>`;
}

export interface Finding {
  /** What happened, in a few words. */
  readonly title: string;
  /** What was seen, with the numbers. */
  readonly seen: string;
  /** What to do about it. */
  readonly todo: string;
  /** A good sign rather than a warning. */
  readonly fine?: boolean;
}

/** Findings as a list: title, what was seen, what to do. */
export function findingsList(findings: readonly Finding[]): string {
  return (
    `<ul class="findings">` +
    findings
      .map(
        (f) =>
          `<li${f.fine ? ' class="fine"' : ''}><strong>${escapeMarkup(f.title)}</strong>${escapeMarkup(f.seen)}${f.todo ? `<br/>What to do: ${escapeMarkup(f.todo)}` : ''}</li>`,
      )
      .join('') +
    `</ul>`
  );
}

/**
 * The whole page as a string.
 * @example writeFileSync('run.html', htmlPage({ title: 'tune iris', sections: [{ heading: 'Loss', body: lineChart(...) }] }))
 */
export function htmlPage(spec: PageSpec): string {
  const facts = spec.facts?.length
    ? `<table class="facts"><tbody>${spec.facts.map(([k, v]) => `<tr><th>${escapeMarkup(k)}</th><td>${escapeMarkup(v)}</td></tr>`).join('')}</tbody></table>`
    : '';
  return [
    '<!DOCTYPE html>',
    '<html lang="en">',
    '<head>',
    '<meta charset="utf-8"/>',
    // Nothing may load from anywhere: no scripts, fonts, images or styles from outside the file.
    `<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'"/>`,
    '<meta name="viewport" content="width=device-width, initial-scale=1"/>',
    `<title>${escapeMarkup(spec.title)}</title>`,
    `<style>${STYLE}</style>`,
    '</head>',
    '<body>',
    '<main>',
    `<h1>${escapeMarkup(spec.title)}</h1>`,
    spec.lead ? para(spec.lead, 'lead') : '',
    facts ? `<section>${facts}</section>` : '',
    ...spec.sections.map((s) => `<section><h2>${escapeMarkup(s.heading)}</h2>${s.intro ? para(s.intro) : ''}${s.body}</section>`),
    '<footer>Written by tendon as one self-contained file: it opens offline and runs no scripts.</footer>',
    '</main>',
    '</body>',
    '</html>',
    '',
  ].join('\n');
}
