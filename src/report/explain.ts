/**
 * The attribution report page: which features the model leaned on over all explained rows, and
 * the signed attributions of the first row, with the caution that they describe the model only.
 */
import { barChart } from './charts.js';
import { htmlPage, para } from './page.js';

/** Features drawn in the "over all rows" chart; the rest are named in a line under it. */
export const EXPLAIN_TOP_FEATURES = 20;

export interface ExplainReportInput {
  readonly title: string;
  /** One sentence: model, rows, steps, baseline, largest completeness gap. */
  readonly lead: string;
  readonly facts?: readonly (readonly [string, string])[];
  readonly features: readonly string[];
  /** Mean |attribution| per feature over all explained rows, in `features` order. */
  readonly meanAbs: readonly number[];
  /** The first row's signed attributions, in `features` order; null when no row was explained. */
  readonly firstRow: readonly number[] | null;
  /** The class explained for the first row, in words. */
  readonly firstClass: string;
  readonly caution: string;
}

/**
 * The attributions of an explain run as one HTML page.
 * @example explainPage({ title: 'tendon explain m.tendon', lead: '...', features: ['a', 'b'], meanAbs: [0.3, 0.1], firstRow: [0.2, -0.1], firstClass: 'yes', caution: '...' })
 */
export function explainPage(input: ExplainReportInput): string {
  const order = input.features.map((_, i) => i).sort((a, b) => input.meanAbs[b] - input.meanAbs[a]);
  const shown = order.slice(0, EXPLAIN_TOP_FEATURES);
  const left = order.length - shown.length;
  const first = input.firstRow;
  return htmlPage({
    title: input.title,
    lead: input.lead,
    facts: input.facts,
    sections: [
      {
        heading: 'Features over all rows',
        intro: `Mean absolute attribution per feature over every explained row, largest first${left > 0 ? ` (the ${EXPLAIN_TOP_FEATURES} largest of ${order.length})` : ''}.`,
        body: barChart({
          title: 'Mean absolute attribution per feature',
          valueTitle: 'mean |attribution|',
          series: ['all rows'],
          groups: shown.map((i) => ({ label: input.features[i], values: [input.meanAbs[i]] })),
        }),
      },
      first === null ? { heading: 'The first row', body: para('No rows were explained.') } : firstRowSection(input.features, first, input.firstClass, left > 0),
      { heading: 'Caution', body: para(`Note: ${input.caution}.`, 'note') },
    ],
  });
}

function firstRowSection(features: readonly string[], row: readonly number[], className: string, cut: boolean) {
  const shown = features
    .map((_, i) => i)
    .sort((a, b) => Math.abs(row[b]) - Math.abs(row[a]))
    .slice(0, EXPLAIN_TOP_FEATURES);
  return {
    heading: 'The first row',
    intro: `Signed attributions of the first row to its class "${className}", largest magnitude first${cut ? ` (${EXPLAIN_TOP_FEATURES} of ${features.length})` : ''}: a bar to the right pushed the score up from the baseline, one to the left pulled it down.`,
    body: barChart({
      title: `First row, class ${className}`,
      valueTitle: 'attribution (share of score − baseline score)',
      series: ['row 1'],
      groups: shown.map((i) => ({ label: features[i], values: [row[i]] })),
    }),
  };
}
