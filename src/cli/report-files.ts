/**
 * `--report FILE`: which picture a file name asks for, and the small adapters from a run's
 * results (tune, check, bench, explain) to the report module's plain records. The pages are drawn in
 * src/report; this file only chooses, maps and writes.
 */
import { writeFile } from 'node:fs/promises';
import { extname } from 'node:path';
import type { BaselineRow, BenchRow } from '../bench/index.js';
import type { ParityReport } from '../check/index.js';
import { UsageError } from '../errors.js';
import type { ModelDoc } from '../model/index.js';
import { benchPage, checkPage, explainPage, tuneCurvesSvg, tunePage, valueText } from '../report/index.js';
import type { OutputComparison } from '../transform/index.js';
import type { TuneResult } from '../train/tune.js';
import { percent } from './format.js';

export type ReportFormat = 'svg' | 'html';

/**
 * The format a --report path asks for, from its extension; `svgToo` says whether the command can
 * write the curves alone as SVG.
 * @throws UsageError for any other extension
 */
export function reportFormat(path: string, svgToo: boolean): ReportFormat {
  const ext = extname(path).toLowerCase();
  if (ext === '.html' || ext === '.htm') return 'html';
  if (ext === '.svg' && svgToo) return 'svg';
  throw new UsageError('--report', `"${path}": name the file ${svgToo ? '.html (the whole run) or .svg (the curves alone)' : '.html'}`);
}

function layerNames(doc: ModelDoc): Record<number, string> {
  const names: Record<number, string> = {};
  doc.layers.forEach((l, i) => (names[i] = l.kind === 'dense' ? `layer ${i} (${l.activation}, ${l.size})` : `layer ${i} (${l.kind})`));
  return names;
}

/** Write a tune run's report as the curves (.svg) or the whole page (.html). */
export async function writeTuneReport(path: string, modelPath: string, result: TuneResult, notes: readonly string[] = []): Promise<void> {
  const input = {
    title: `tendon tune ${modelPath}`,
    epochs: result.history.map((e) => ({
      epoch: e.epoch,
      trainLoss: e.train.loss,
      holdoutLoss: e.holdout?.loss ?? null,
      trainAccuracy: e.train.accuracy,
      holdoutAccuracy: e.holdout?.accuracy ?? null,
      gradientNorms: e.gradientNorms,
      deadRelu: e.deadRelu,
      confusion: e.holdout ? e.holdout.confusion : e.train.confusion,
    })),
    bestEpoch: result.bestEpoch,
    stoppedEarly: result.stoppedEarly,
    diagnostics: result.diagnostics,
    classLabels: result.doc.labels,
    layerNames: layerNames(result.doc),
    facts: [
      ['model', modelPath],
      ['layers', result.doc.layers.map((l, i) => layerNames(result.doc)[i]).join(', ')],
      ['loss', result.loss.name],
      ['ran on', result.path === 'fast' ? 'the fast kernel' : result.path === 'engine' ? 'the tfjs engine' : 'the float64 reference'],
      ['epochs', `${result.history.length}${result.stoppedEarly ? ' (stopped early)' : ''}; weights from epoch ${result.bestEpoch + 1}`],
    ] as [string, string][],
    notes,
  };
  await writeFile(path, reportFormat(path, true) === 'svg' ? tuneCurvesSvg(input) : tunePage(input));
}

/** Write the parity check (engine against reference, per layer) as an HTML page. */
export async function writeCheckReport(path: string, modelPath: string, engine: string, report: ParityReport, rowsFrom: string): Promise<void> {
  await writeFile(
    path,
    checkPage({
      title: `tendon check ${modelPath}`,
      lead: `The ${engine} engine (float32) against the float64 reference path, layer by layer, on ${report.output.rows} rows ${rowsFrom}.`,
      facts: [
        ['model', modelPath],
        ['engine', engine],
        ['tolerance', `abs ${report.tolerance.abs}, rel ${report.tolerance.rel}`],
      ],
      tolerance: report.tolerance,
      rows: [
        ...report.layers.map((l) => ({
          label: `${l.index} ${l.kind}`,
          maxAbs: l.maxAbs,
          maxRel: l.maxRel,
          pass: l.pass,
          where: `row ${l.worstRow}, column ${l.worstCol}`,
        })),
        {
          label: 'output',
          maxAbs: report.output.maxAbs,
          maxRel: report.output.maxRel,
          pass: report.output.pass,
          where: `row ${report.output.worstRow}, column ${report.output.worstCol}`,
        },
      ],
      pass: report.pass,
      topClassAgreement: report.output.topClassAgreement,
    }),
  );
}

/** Write `check MODEL --against PARENT` (outputs only) as an HTML page. */
export async function writeAgainstReport(path: string, modelPath: string, parentPath: string, storage: string, c: OutputComparison): Promise<void> {
  await writeFile(
    path,
    checkPage({
      title: `tendon check ${modelPath} --against ${parentPath}`,
      lead: `The outputs of ${modelPath} (${storage} storage) against ${parentPath} on ${c.rows} rows, both on the float64 reference path.`,
      tolerance: c.tolerance,
      rows: [{ label: 'output', maxAbs: c.maxAbs, maxRel: c.maxRel, pass: c.pass, where: `row ${c.worstRow}, column ${c.worstCol}` }],
      pass: c.pass,
      topClassAgreement: c.topClassAgreement,
    }),
  );
}

/** Write a bench run (engine rows and the baselines timed in the same run) as an HTML page. */
export async function writeBenchReport(
  path: string,
  modelPath: string,
  rows: readonly BenchRow[],
  baselines: { rows: readonly BaselineRow[]; notes: readonly string[] },
): Promise<void> {
  const best = rows.reduce<BenchRow | null>((a, r) => (a === null || r.rowsPerSec > a.rowsPerSec ? r : a), null);
  await writeFile(
    path,
    benchPage({
      title: `tendon bench ${modelPath}`,
      lead: best
        ? `Fastest: the ${best.engine} engine at batch ${best.batch}, ${valueText(best.rowsPerSec, false)} rows/s on this machine.`
        : 'Nothing was measured.',
      facts: [
        ['model', modelPath],
        ['node', process.version],
      ],
      measures: [
        ...rows.map((r) => ({ name: `${r.engine} engine`, kind: 'engine' as const, batch: r.batch, rowsPerSec: r.rowsPerSec })),
        ...baselines.rows.map((b) => ({ name: b.name, kind: 'baseline' as const, batch: b.batch, rowsPerSec: b.rowsPerSec })),
      ],
      notes: baselines.notes,
    }),
  );
}

/** What an explain run gathered for its report, besides the rows it wrote. */
export interface ExplainSummary {
  readonly features: readonly string[];
  readonly rows: number;
  /** Sum of |attribution| per feature over all rows. */
  readonly sumAbs: Float64Array;
  /** The first row's attributions and its explained output index, or null when no row was read. */
  readonly first: { readonly attributions: Float64Array; readonly output: number } | null;
  readonly labels?: readonly string[];
  /** Steps asked for, and the most any row used. */
  readonly steps: number;
  readonly mostSteps: number;
  /** The baseline, in words ("the stored average input"). */
  readonly baseline: string;
  readonly worstGap: number;
  readonly caution: string;
}

/** Write an explain run (mean |attribution| per feature, the first row's attributions) as an HTML page. */
export async function writeExplainReport(path: string, modelPath: string, s: ExplainSummary): Promise<void> {
  const gap = percent(s.worstGap, 2);
  const cls = s.first === null ? '' : (s.labels?.[s.first.output] ?? `output ${s.first.output}`);
  await writeFile(
    path,
    explainPage({
      title: `tendon explain ${modelPath}`,
      lead: `${modelPath} on ${s.rows} rows, ${s.steps} steps${s.mostSteps > s.steps ? ` (up to ${s.mostSteps} on rows redone)` : ''}, against ${s.baseline}; largest completeness gap ${gap}.`,
      facts: [
        ['model', modelPath],
        ['rows', String(s.rows)],
        ['steps', s.mostSteps > s.steps ? `${s.steps} (up to ${s.mostSteps})` : String(s.steps)],
        ['baseline', s.baseline],
        ['largest completeness gap', gap],
      ],
      features: s.features,
      meanAbs: Array.from(s.sumAbs, (v) => (s.rows > 0 ? v / s.rows : 0)),
      firstRow: s.first === null ? null : Array.from(s.first.attributions),
      firstClass: cls,
      caution: s.caution,
    }),
  );
}
