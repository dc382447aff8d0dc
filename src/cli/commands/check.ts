import { INT8_SIGMAS, randomInputs, type ParityReport } from '../../check/index.js';
import { UsageError } from '../../errors.js';
import { readModelFile } from '../../format/index.js';
import { compareOutputs, compareWithParent, costVerdict, SHRINK_TOLERANCE, type OutputComparison } from '../../transform/index.js';
import type { EngineChoice } from '../../engine/index.js';
import { outputsAreClasses, type ModelDoc } from '../../model/index.js';
import { describeChange, RANDOM_ROWS_CAUTION } from './shrink.js';
import { openModel, type TendonModel } from '../../tendon.js';
import { noExtraPositionals, parseArgs, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { percent, sci, textTable } from '../format.js';
import { readInputRows } from '../model-input.js';
import { loadTrainingData } from '../training-data.js';
import { CALIBRATION_CAUTION, ECE_BINS, accuracy, argmaxRows, classProbabilities, expectedCalibrationError } from '../../train/index.js';
import { reportFormat, writeAgainstReport, writeCheckReport } from '../report-files.js';
import { parseEngine } from './engine-flag.js';

const flags = {
  input: { kind: 'string', short: 'i', help: 'rows to check on (.csv, .jsonl, .npy); default: seeded random rows' },
  rows: { kind: 'integer', help: 'random rows when no --input is given', default: 256 },
  seed: { kind: 'integer', help: 'seed for the random rows', default: 1 },
  engine: { kind: 'string', help: 'auto, fast, int8, wasm or js (default auto); with --against, run MODEL on this engine' },
  json: { kind: 'boolean', help: 'print the report as JSON' },
  target: {
    kind: 'string',
    short: 't',
    help: 'with --input: the class column; also report accuracy and calibration error (ECE, 15 bins) on those labelled rows',
  },
  report: { kind: 'string', help: 'also write the per-layer errors against the tolerance as one HTML page (FILE.html)' },
  against: {
    kind: 'string',
    help: "judge MODEL against its parent file instead (both on the float64 reference path unless --engine is given; tolerance by MODEL's storage)",
  },
} as const;

/** At most this many rows of an input file are checked: the float64 reference is slow by design. */
const MAX_CHECK_ROWS = 100_000;

export const check: Command = {
  name: 'check',
  usage: 'tendon check MODEL [--input FILE [--target COLUMN]] [--rows N] [--json] [--engine js|wasm|fast|int8|auto] [--against PARENT] [--report FILE.html]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const rows = f.rows ?? 256;
    if (rows < 1) throw new UsageError('--rows', `must be at least 1, got ${rows}`);
    if (f.target !== undefined && !f.input) throw new UsageError('--target', 'needs --input: the labelled rows to judge');
    if (f.target !== undefined && f.against) throw new UsageError('--target', 'cannot be combined with --against');
    if (f.report) reportFormat(f.report, false);
    if (f.against) {
      const engine = f.engine === undefined ? null : parseEngine(f.engine);
      if (engine !== null && f.report) throw new UsageError('--report', 'draws the reference-path comparison of --against; leave out --engine for it');
      return checkAgainst({ path, parentPath: f.against, rows, seed: f.seed ?? 1, input: f.input, json: f.json, engine, reportPath: f.report }, io);
    }
    const model = await openModel(path, { engine: parseEngine(f.engine) });
    try {
      const input = f.input ? await readInput(model, f.input) : undefined;
      const report = model.check(input ?? { x: randomInputs(model.doc, rows, f.seed ?? 1), rows });
      const labelled = f.input && f.target !== undefined ? await labelledQuality(model, f.input, f.target) : null;
      if (f.json)
        io.out(JSON.stringify({ model: path, engine: model.engine, kernel: model.kernel, ...report, ...(labelled ? { labelled } : {}) }, null, 2) + '\n');
      else {
        io.out(
          describeParity(
            report,
            `${path} on the ${model.engine} engine (${model.kernel}), ${report.output.rows} rows${f.input ? ` from ${f.input}` : ' (seeded random, not representative of real inputs)'}`,
            model.engine === 'int8',
          ),
        );
        if (labelled) io.out(describeLabelled(labelled, f.input ?? ''));
      }
      if (f.report) await writeCheckReport(f.report, path, model.engine, report, f.input ? `from ${f.input}` : '(seeded random)');
      return report.pass ? 0 : 1;
    } finally {
      model.dispose();
    }
  },
};

async function readInput(model: Pick<TendonModel, 'doc' | 'inputs'>, file: string): Promise<{ x: Float32Array; rows: number }> {
  return readInputRows(model.doc, file, MAX_CHECK_ROWS);
}

/** The parity report as a table people can read. */
export function describeParity(report: ParityReport, title: string, integer = false): string {
  const rows = report.layers.map((l) => [
    String(l.index),
    l.kind,
    sci(l.maxAbs),
    sci(l.maxRel),
    l.pass ? 'ok' : `BROKEN at row ${l.worstRow}, column ${l.worstCol}`,
  ]);
  rows.push(['out', 'output', sci(report.output.maxAbs), sci(report.output.maxRel), report.output.pass ? 'ok' : 'BROKEN']);
  const agreement = report.output.topClassAgreement;
  return (
    `parity: ${title}\n` +
    (integer
      ? `int8 engine vs float64 reference on the stored weights; each element within ${INT8_SIGMAS} deviations of its activation quantisation (widest allowance ${sci(report.tolerance.abs)}) plus float32 tolerance\n\n`
      : `float32 engine vs float64 reference; tolerance abs ${report.tolerance.abs}, rel ${report.tolerance.rel}\n\n`) +
    textTable(['#', 'layer', 'max abs err', 'max rel err', 'verdict'], rows) +
    (agreement === null ? '' : `top class agrees on ${percent(agreement, 2)} of rows\n`) +
    `${report.pass ? 'PASS' : 'FAIL'}: ${report.pass ? 'every layer within tolerance' : 'a tolerance is broken'}\n`
  );
}

interface AgainstRequest {
  readonly path: string;
  readonly parentPath: string;
  readonly rows: number;
  readonly seed: number;
  readonly input: string | undefined;
  readonly json: boolean;
  /** Run MODEL on this engine; null: on the float64 reference path, as the parent. */
  readonly engine: EngineChoice | null;
  readonly reportPath?: string;
}

/** `check MODEL --against PARENT`: the two models' outputs on the same rows, both on the float64 reference path (or MODEL on an engine). */
async function checkAgainst(req: AgainstRequest, io: { out(t: string): void }): Promise<number> {
  const { path, parentPath, input, json } = req;
  const [child, parent] = await Promise.all([readModelFile(path), readModelFile(parentPath)]);
  // Rows are drawn around the PARENT's statistics: a folded child no longer keeps its own.
  const x = input
    ? await readInput({ doc: parent.doc, inputs: parent.doc.inputs }, input)
    : { x: randomInputs(parent.doc, req.rows, req.seed), rows: req.rows };
  const tolerance = SHRINK_TOLERANCE[child.doc.storage];
  const c: OutputComparison = compareOutputs(parent.doc, child.doc, x.x, x.rows, tolerance);
  const rowsText = `${c.rows} rows${input ? ` from ${input}` : ` (seeded random: ${RANDOM_ROWS_CAUTION})`}`;
  if (req.engine !== null) return checkEngineAgainst(req, child.doc, parent.doc, x, c, rowsText, io);
  if (json) {
    io.out(JSON.stringify({ model: path, against: parentPath, storage: child.doc.storage, ...c }, null, 2) + '\n');
  } else {
    io.out(
      `${path} (${child.doc.storage}, ${child.doc.layers.length} layers) against ${parentPath} (${parent.doc.storage}, ${parent.doc.layers.length} layers), ` +
        `${rowsText}, float64 reference path for both\n` +
        `tolerance for ${child.doc.storage} storage: abs ${tolerance.abs}, rel ${tolerance.rel}\n` +
        `max abs err ${sci(c.maxAbs)}, max rel err ${sci(c.maxRel)}${c.pass ? '' : ` (worst at row ${c.worstRow}, column ${c.worstCol})`}\n` +
        (c.topClassAgreement === null ? '' : `top class agrees on ${percent(c.topClassAgreement, 2)} of rows\n`) +
        `${c.pass ? 'PASS' : 'FAIL'}: ${costVerdict(c)}; a value passes when its abs error <= abs or its rel error <= rel\n`,
    );
  }
  if (req.reportPath) await writeAgainstReport(req.reportPath, path, parentPath, child.doc.storage, c);
  return c.pass ? 0 : 1;
}

/**
 * MODEL run on an engine against PARENT on the float64 reference path: top-class agreement and
 * the largest probability change (per-value errors for values). The verdict has two parts, each
 * held to a bound stated elsewhere: the stored weights against the parent (both on the reference
 * path, tolerance by storage: transform/tolerance.ts) and the engine against the reference on those
 * stored weights (the int8 bound derived in check/tolerance.ts, or the float32 tolerance). Their
 * sum is what the engine's answers may differ from the parent's.
 */
async function checkEngineAgainst(
  req: AgainstRequest,
  childDoc: ModelDoc,
  parentDoc: ModelDoc,
  x: { x: Float32Array; rows: number },
  weights: OutputComparison,
  rowsText: string,
  io: { out(t: string): void },
): Promise<number> {
  const model = await openModel(req.path, { engine: req.engine ?? 'auto' });
  try {
    const run = compareWithParent(parentDoc, model.run(x.x, x.rows), x.x, x.rows, weights.tolerance);
    const parity = model.check(x);
    const pass = weights.pass && parity.pass;
    if (req.json) {
      const summary = { maxAbs: run.maxAbs, maxRel: run.maxRel, topClassAgreement: run.topClassAgreement, rows: run.rows };
      const out = {
        model: req.path,
        against: req.parentPath,
        storage: childDoc.storage,
        engine: model.engine,
        kernel: model.kernel,
        run: summary,
        weights,
        parity,
        pass,
      };
      io.out(JSON.stringify(out, null, 2) + '\n');
    } else {
      io.out(
        `${req.path} (${childDoc.storage}) on the ${model.engine} engine (${model.kernel}) against ${req.parentPath} (${parentDoc.storage}) on the float64 reference path, ${rowsText}\n` +
          `${describeChange(run, parentDoc)}\n` +
          `stored weights against the parent (float64 path for both; abs ${weights.tolerance.abs} or rel ${weights.tolerance.rel} per value): ${costVerdict(weights)}\n` +
          `the ${model.engine} engine against the float64 reference on the stored weights: ${parity.pass ? 'within' : 'BROKEN:'} ` +
          `${model.engine === 'int8' ? 'the bound its activation quantisation allows' : 'float32 tolerance'} (max abs err ${sci(parity.output.maxAbs)})\n` +
          `${pass ? 'PASS' : 'FAIL'}: ${pass ? 'both parts within their bounds' : 'a bound is broken'}\n`,
      );
    }
    return pass ? 0 : 1;
  } finally {
    model.dispose();
  }
}

/** Accuracy, calibration error and mean NLL of the model as it runs, on labelled rows. */
interface LabelledQuality {
  readonly rows: number;
  readonly accuracy: number;
  readonly ece: number;
  readonly bins: number;
  /** Mean negative log-likelihood in nats per row (probabilities clamped at 1e-12). */
  readonly nll: number;
  /** The calibration temperature the model applies; null when it has none. */
  readonly temperature: number | null;
  readonly caution: string;
}

async function labelledQuality(model: TendonModel, file: string, target: string): Promise<LabelledQuality> {
  if (!outputsAreClasses(model.doc))
    throw new UsageError('--target', 'accuracy and calibration error need a classifier (a softmax output, or one sigmoid unit)');
  const data = await loadTrainingData(model.doc, file, [target]);
  const labels = data.y as Int32Array;
  const y = model.run(Float32Array.from(data.x), data.rows);
  const { probs, classes } = classProbabilities(y, data.rows, model.outputs);
  let nll = 0;
  for (let r = 0; r < data.rows; r++) nll -= Math.log(Math.max(probs[r * classes + labels[r]], 1e-12));
  return {
    rows: data.rows,
    accuracy: accuracy(argmaxRows(probs, data.rows, classes), labels),
    ece: expectedCalibrationError(probs, data.rows, classes, labels),
    bins: ECE_BINS,
    nll: nll / Math.max(data.rows, 1),
    temperature: model.doc.temperature ?? null,
    caution: CALIBRATION_CAUTION,
  };
}

function describeLabelled(q: LabelledQuality, file: string): string {
  return (
    `\non ${q.rows} labelled rows of ${file}: accuracy ${percent(q.accuracy, 2)}, calibration error (ECE, ${q.bins} bins) ${q.ece.toFixed(4)}, ` +
    `mean NLL ${q.nll.toFixed(4)}; ${q.temperature === null ? 'no calibration temperature' : `calibration temperature ${q.temperature.toFixed(4)}`}\n` +
    `note: ${q.caution}\n`
  );
}
