import { UsageError } from '../../errors.js';
import {
  ATTRIBUTION_CAUTION,
  AUTO_STEPS_LIMIT,
  DEFAULT_STEPS,
  GAP_TOLERANCE,
  checkBaselineRow,
  checkSteps,
  explainRows,
  namedBaseline,
  parseClassChoice,
  type ClassChoice,
} from '../../explain/index.js';
import { readModelFile } from '../../format/index.js';
import { openTableWriter } from '../../io/index.js';
import { validateModel, type ModelDoc } from '../../model/index.js';
import type { Command } from '../command.js';
import { grouped, percent } from '../format.js';
import { inputChunks } from '../model-input.js';
import { reportFormat, writeExplainReport, type ExplainSummary } from '../report-files.js';
import { parseRowFileArgs, rowFileFlags } from './row-files.js';

const flags = {
  ...rowFileFlags('explain', 'one attribution row per input row'),
  class: { kind: 'string', help: "the output explained: top (each row's top output), a label, or an index", default: 'top' },
  steps: {
    kind: 'integer',
    help: `integration steps, 1 to 10000 (rows over a 1% completeness gap are redone with more, up to ${AUTO_STEPS_LIMIT})`,
    default: DEFAULT_STEPS,
  },
  baseline: { kind: 'string', help: 'what a row is compared with: mean (the stored average input), zeros, or a file holding one row', default: 'mean' },
  report: { kind: 'string', help: 'also write the attributions per feature (all rows, and the first row) as one HTML page (FILE.html)' },
} as const;

/** Rows explained at a time: the float64 path runs steps x rows points per chunk. */
const CHUNK_ROWS = 256;

export const explain: Command = {
  name: 'explain',
  usage: 'tendon explain MODEL --input ROWS --output OUT.csv [--class top|LABEL|INDEX] [--steps N] [--baseline mean|zeros|FILE] [--report FILE.html]',
  flags,
  async run(argv, io) {
    const { flags: f, path, input, output } = parseRowFileArgs(argv, flags);
    const steps = checkSteps(f.steps ?? DEFAULT_STEPS, '--steps');
    if (f.report) reportFormat(f.report, false);
    const { doc } = await readModelFile(path);
    validateModel(doc, path);
    const choice = parseClassChoice(doc, f.class ?? 'top', '--class');
    const baselineName = f.baseline ?? 'mean';
    const baseline = await baselineOf(doc, baselineName);

    const names = doc.features ?? Array.from({ length: doc.inputs }, (_, i) => `x${i}`);
    const writer = await openTableWriter(output, [...names, 'score', 'baseline_score', 'class', 'gap', 'steps']);
    const width = doc.inputs + 5;
    let rows = 0;
    let raised = 0;
    let over = 0;
    let worst = 0;
    let mostSteps = steps;
    const sumAbs = new Float64Array(doc.inputs);
    let first: ExplainSummary['first'] = null;
    const started = performance.now();
    try {
      for await (const chunk of inputChunks(doc, input, CHUNK_ROWS)) {
        const e = explainRows(doc, chunk.x, chunk.rows, { output: choice, baseline, steps });
        const out = new Float64Array(chunk.rows * width);
        for (let r = 0; r < chunk.rows; r++) {
          const o = r * width;
          out.set(e.attributions.subarray(r * doc.inputs, (r + 1) * doc.inputs), o);
          out[o + doc.inputs] = e.score[r];
          out[o + doc.inputs + 1] = e.baselineScore[r];
          out[o + doc.inputs + 2] = e.classes[r];
          out[o + doc.inputs + 3] = e.gaps[r];
          out[o + doc.inputs + 4] = e.steps[r];
          if (e.steps[r] > steps) raised++;
          worst = Math.max(worst, e.gaps[r]);
          mostSteps = Math.max(mostSteps, e.steps[r]);
          for (let j = 0; j < doc.inputs; j++) sumAbs[j] += Math.abs(out[o + j]);
        }
        if (first === null && chunk.rows > 0) first = { attributions: out.slice(0, doc.inputs), output: e.classes[0] };
        over += e.overTolerance;
        await writer.write(chunk.rows, out);
        rows += chunk.rows;
      }
      await writer.close();
    } catch (error) {
      await writer.abort();
      throw error;
    }
    const seconds = (performance.now() - started) / 1000;
    io.err(
      `explained ${grouped(rows)} rows into ${output} in ${seconds.toFixed(2)} s: ${describeChoice(doc, choice)}, against the ${describeBaseline(baselineName)}, ${steps} steps` +
        (raised > 0 ? ` (${grouped(raised)} rows redone with up to ${mostSteps})` : '') +
        '\n' +
        `completeness: attributions sum to score - baseline_score with a largest gap of ${percent(worst, 2)}` +
        (over === 0
          ? ` (within ${percent(GAP_TOLERANCE, 0)} on every row)\n`
          : `; ${grouped(over)} rows still pass ${percent(GAP_TOLERANCE, 0)} at ${mostSteps} steps and their attributions are approximate (try --steps ${Math.min(10_000, mostSteps * 4)})\n`) +
        `note: ${ATTRIBUTION_CAUTION}\n`,
    );
    if (f.report) {
      const baseline = `the ${describeBaseline(baselineName)}`;
      const labels = doc.labels ?? undefined;
      await writeExplainReport(f.report, path, {
        features: names,
        rows,
        sumAbs,
        first,
        labels,
        steps,
        mostSteps,
        baseline,
        worstGap: worst,
        caution: ATTRIBUTION_CAUTION,
      });
    }
    return 0;
  },
};

async function baselineOf(doc: ModelDoc, value: string): Promise<Float64Array> {
  if (value === 'mean' || value === 'zeros') return namedBaseline(doc, value, '--baseline');
  const rows: Float32Array[] = [];
  for await (const chunk of inputChunks(doc, value, 2)) {
    for (let r = 0; r < chunk.rows; r++) rows.push(chunk.x.subarray(r * doc.inputs, (r + 1) * doc.inputs));
    if (rows.length > 1) break;
  }
  if (rows.length !== 1)
    throw new UsageError('--baseline', `${value} holds ${rows.length === 0 ? 'no rows' : 'more than one row'}; give a file with exactly one baseline row`);
  return checkBaselineRow(doc, rows[0], '--baseline');
}

function describeChoice(doc: ModelDoc, choice: ClassChoice): string {
  if (choice === 'top') return "each row's top output";
  return `output ${choice}${doc.labels ? ` ("${doc.labels[choice]}")` : ''}`;
}

function describeBaseline(name: string): string {
  return name === 'mean' ? 'stored average input' : name === 'zeros' ? 'all-zero input' : `baseline row of ${name}`;
}
