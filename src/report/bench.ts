/**
 * The bench report page: rows per second of each engine measured, beside the baselines timed
 * in the same run on the same rows (absolute figures drift on a shared machine; ratios within
 * one run hold).
 */
import { barChart } from './charts.js';
import { htmlPage, htmlTable, para } from './page.js';
import { valueText } from './scale.js';

export interface BenchMeasure {
  /** The engine or baseline ("fast", "float64 reference"). */
  readonly name: string;
  readonly kind: 'engine' | 'baseline';
  readonly batch: number;
  /** null when it was not run (with the reason in the notes). */
  readonly rowsPerSec: number | null;
}

export interface BenchReportInput {
  readonly title: string;
  readonly lead: string;
  readonly facts?: readonly (readonly [string, string])[];
  readonly measures: readonly BenchMeasure[];
  readonly notes?: readonly string[];
}

/**
 * The bench run as one HTML page.
 * @example writeFileSync('bench.html', benchPage({ title: 'bench m.tendon', lead: '...', measures }))
 */
export function benchPage(input: BenchReportInput): string {
  const names = [...new Set([...input.measures.filter((m) => m.kind === 'engine'), ...input.measures.filter((m) => m.kind === 'baseline')].map((m) => m.name))];
  const engines = names.filter((n) => input.measures.some((m) => m.name === n && m.kind === 'engine'));
  const baselines = names.filter((n) => !engines.includes(n));
  const batches = [...new Set(input.measures.map((m) => m.batch))].sort((a, b) => a - b);
  const rate = (name: string, batch: number) => input.measures.find((m) => m.name === name && m.batch === batch)?.rowsPerSec ?? null;
  const ratioHead = engines.flatMap((e) => baselines.map((b) => `${e} ÷ ${b}`));
  const rows = batches.map((batch) => [
    String(batch),
    ...names.map((n) => {
      const r = rate(n, batch);
      return r === null ? 'not run' : valueText(r, false);
    }),
    ...engines.flatMap((e) =>
      baselines.map((b) => {
        const x = rate(e, batch);
        const y = rate(b, batch);
        return x === null || y === null ? '—' : `${valueText(x / y, false)}×`;
      }),
    ),
  ]);
  return htmlPage({
    title: input.title,
    lead: input.lead,
    facts: input.facts,
    sections: [
      {
        heading: 'Rows per second',
        intro: 'Longer is faster. Each group is one batch size (rows per call); the log scale keeps slow and fast paths readable side by side.',
        body: barChart({
          title: 'Throughput per engine and baseline',
          valueTitle: 'rows per second',
          series: names,
          groups: batches.map((b) => ({ label: `batch ${b}`, values: names.map((n) => rate(n, b)) })),
          log: true,
        }),
      },
      {
        heading: 'The numbers',
        intro: baselines.length ? 'Ratios above 1 mean the engine beat the baseline in this run.' : undefined,
        body: htmlTable(['batch', ...names.map((n) => `${n} rows/s`), ...ratioHead], rows, rows[0]?.map((_, i) => i) ?? []),
      },
      ...(input.notes?.length ? [{ heading: 'Notes', body: input.notes.map((n) => para(n, 'note')).join('') }] : []),
    ],
  });
}
