/**
 * The parity report page: per-layer error of the engine against the float64 reference, drawn
 * against the tolerance, with the verdict in words.
 */
import { barChart } from './charts.js';
import { htmlPage, htmlTable, para } from './page.js';
import { valueText } from './scale.js';

export interface ParityRowView {
  /** "0 dense", "output". */
  readonly label: string;
  readonly maxAbs: number;
  readonly maxRel: number;
  readonly pass: boolean;
  /** Where the worst element is, in words ("row 3, column 1"). */
  readonly where?: string;
}

export interface CheckReportInput {
  readonly title: string;
  /** What was compared, in one sentence. */
  readonly lead: string;
  readonly facts?: readonly (readonly [string, string])[];
  readonly tolerance: { readonly abs: number; readonly rel: number };
  readonly rows: readonly ParityRowView[];
  readonly pass: boolean;
  readonly topClassAgreement?: number | null;
}

/**
 * The parity check as one HTML page.
 * @example writeFileSync('check.html', checkPage({ title: 'check m.tendon', lead: '...', tolerance: { abs: 1e-4, rel: 1e-4 }, rows, pass: true }))
 */
export function checkPage(input: CheckReportInput): string {
  const groups = (pick: (r: ParityRowView) => number) => input.rows.map((r) => ({ label: r.label, values: [pick(r)] }));
  const broken = input.rows.filter((r) => !r.pass);
  const verdict = input.pass
    ? `<p class="verdict pass">PASS: every layer is within the tolerance.</p>`
    : `<p class="verdict fail">FAIL: ${broken.map((r) => r.label).join(', ')} broke the tolerance.</p>`;
  const agreement =
    input.topClassAgreement === null || input.topClassAgreement === undefined
      ? ''
      : para(`The largest output is in the same column on both paths for ${valueText(input.topClassAgreement, true)} of rows.`);
  return htmlPage({
    title: input.title,
    lead: input.lead,
    facts: input.facts,
    sections: [
      {
        heading: 'Verdict',
        intro: `An element passes when its absolute error is at most ${valueText(input.tolerance.abs, false)} or its relative error at most ${valueText(input.tolerance.rel, false)}; a bar past one dashed line can still pass by the other.`,
        body:
          verdict +
          agreement +
          (input.pass
            ? ''
            : para(
                'What to do: a layer far past the tolerance points to a wrong weight or a kernel fault on this engine; run the same check with --engine js to see whether the engine is to blame, and report it with the model file.',
              )),
      },
      {
        heading: 'Largest absolute error per layer',
        body: barChart({
          title: 'Absolute error against the tolerance',
          valueTitle: 'largest |engine − reference|',
          series: ['max abs error'],
          groups: groups((r) => r.maxAbs),
          log: true,
          marks: [{ value: input.tolerance.abs, label: 'tolerance' }],
        }),
      },
      {
        heading: 'Largest relative error per layer',
        body: barChart({
          title: 'Relative error against the tolerance',
          valueTitle: 'largest relative error',
          series: ['max rel error'],
          groups: groups((r) => r.maxRel),
          log: true,
          marks: [{ value: input.tolerance.rel, label: 'tolerance' }],
        }),
      },
      {
        heading: 'The numbers',
        body: htmlTable(
          ['layer', 'max abs err', 'max rel err', 'verdict'],
          input.rows.map((r) => [
            r.label,
            valueText(r.maxAbs, false),
            valueText(r.maxRel, false),
            r.pass ? 'within' : `over${r.where ? ` (worst at ${r.where})` : ''}`,
          ]),
          [1, 2],
        ),
      },
    ],
  });
}
