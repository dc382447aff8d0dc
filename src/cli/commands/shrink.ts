import { randomInputs } from '../../check/index.js';
import { openRunner } from '../../engine/index.js';
import { DataError, UsageError } from '../../errors.js';
import { readModelFile, writeModelFile } from '../../format/index.js';
import { denseLayerIndices, outputsAreClasses, type ModelDoc } from '../../model/index.js';
import {
  compareOutputs,
  compareWithParent,
  costVerdict,
  RangeRecorder,
  shrinkModel,
  SHRINK_TOLERANCE,
  withActivationRanges,
  type OutputComparison,
} from '../../transform/index.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { bytesText, percent, sci } from '../format.js';
import { inputChunks, readInputRows } from '../model-input.js';
import { parseStore } from './pack.js';

const flags = {
  store: { kind: 'string', help: 'storage for the dense weights: f16 or i8 (or f32 to expand back)' },
  out: { kind: 'string', short: 'o', help: 'where to write the shrunken model' },
  calibrate: {
    kind: 'string',
    help: "with --store i8: real rows (.csv, .jsonl, .npy) whose per-layer activation ranges are stored, so the int8 engine quantises onto them instead of each row's own range",
  },
  rows: { kind: 'string', help: 'real rows (.csv, .jsonl, .npy) to judge the shrunk model against its parent on; default: seeded random rows' },
} as const;

/** At most this many rows judge the shrunk model: both run on the float64 reference path, slow by design. */
const MAX_JUDGE_ROWS = 100_000;

/** Said whenever seeded random rows are all a judgement rests on. */
export const RANDOM_ROWS_CAUTION = "random inputs are not representative of a trained model's inputs";

export const shrink: Command = {
  name: 'shrink',
  usage: 'tendon shrink MODEL --store f16|i8 -o OUT [--calibrate ROWS] [--rows ROWS]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const codec = parseStore(requireFlag(f.store, 'store'));
    const out = requireFlag(f.out, 'out');
    if (f.calibrate !== undefined && codec !== 'i8')
      throw new UsageError('--calibrate', `stores activation ranges for the int8 engine: it needs --store i8, got --store ${codec}`);
    const read = await readModelFile(path);
    let small = shrinkModel(read.doc, codec, { parent: { checksum: read.checksum, source: path } });
    if (f.calibrate !== undefined) small = withActivationRanges(small, await recordRanges(small, f.calibrate));
    const written = await writeModelFile(out, small);
    const judged = await judge(read.doc, small, f.rows);
    io.out(
      `shrank ${path} (${bytesText(read.bytes)}, ${read.doc.storage}) to ${out} (${bytesText(written.bytes)}, ${codec}), checksum ${written.checksum}\n` +
        (f.calibrate !== undefined ? describeRanges(small, f.calibrate) : '') +
        judged +
        (f.rows ? '' : `judge it on your own rows: tendon shrink ... --rows ROWS, or tendon check ${out} --against ${path} --input ROWS\n`),
    );
    return 0;
  },
};

/** Each dense layer's input range over every row of `file` (streamed), on the float64 path over the stored weights. */
async function recordRanges(doc: ModelDoc, file: string) {
  const recorder = new RangeRecorder(doc);
  for await (const chunk of inputChunks(doc, file, 4096)) {
    const bad = recorder.add(chunk.x, chunk.rows);
    if (bad >= 0) {
      throw new DataError(
        file,
        chunk.firstLine + bad,
        0,
        'this row gives a NaN or infinite value inside the model, so no activation range can be recorded from it',
      );
    }
  }
  const ranges = recorder.ranges();
  if (!ranges) throw new DataError(file, 0, 0, 'has no rows to record activation ranges from');
  return ranges;
}

function describeRanges(doc: ModelDoc, file: string): string {
  const r = doc.activationRanges!;
  const each = denseLayerIndices(doc.layers).map((layer, d) => `layers[${layer}] [${sci(r.min[d])}, ${sci(r.max[d])}]`);
  return `int8 activation ranges from ${r.rows} rows of ${file} (each dense layer's input): ${each.join(', ')}\n`;
}

/**
 * The shrunk model against its parent on real rows (or seeded random ones, said so): top-class
 * agreement and the largest probability change for a classifier, per-value errors otherwise; for
 * i8 also as the int8 engine runs it, since that is what `auto` runs for an i8 file.
 */
async function judge(parent: ModelDoc, small: ModelDoc, rowsFile: string | undefined): Promise<string> {
  const { x, rows } = rowsFile ? await readInputRows(parent, rowsFile, MAX_JUDGE_ROWS) : { x: randomInputs(parent, 256, 1), rows: 256 };
  const where = rowsFile ? `${rows} rows of ${rowsFile}` : `${rows} seeded random rows (${RANDOM_ROWS_CAUTION}; judge it on real rows with --rows FILE)`;
  const tolerance = SHRINK_TOLERANCE[small.storage];
  const stored = compareOutputs(parent, small, x, rows, tolerance);
  let text =
    `against ${where}:\n` +
    `  stored weights (float64 path for both): ${describeChange(stored, parent)}; ${costVerdict(stored)}; bound per value: abs ${tolerance.abs} or rel ${tolerance.rel}\n`;
  if (small.storage === 'i8') {
    try {
      const runner = openRunner(small, 'int8', { source: '(shrunk model)' });
      try {
        const engine = compareWithParent(parent, runner.run(x, rows), x, rows, tolerance);
        const how = small.activationRanges ? 'activations on the stored ranges' : "activations on each row's own range";
        text += `  on the int8 engine (${how}): ${describeChange(engine, parent)}\n`;
      } finally {
        runner.dispose();
      }
    } catch (error) {
      text += `  on the int8 engine: not run here (${error instanceof Error ? error.message : String(error)})\n`;
    }
  }
  return text;
}

/**
 * How far outputs moved from the parent's, in the terms of the answer: for classes the top-class
 * agreement and the largest probability change, for values each value's error.
 * @example describeChange(c, parent) // "top class agrees on 99.81% of rows, largest probability change 2.10e-2"
 */
export function describeChange(c: OutputComparison, parent: ModelDoc): string {
  if (outputsAreClasses(parent)) {
    const agreement = c.topClassAgreement === null ? '' : `top class agrees on ${percent(c.topClassAgreement, 2)} of rows, `;
    return `${agreement}largest probability change ${sci(c.maxAbs)}`;
  }
  return `per-value error: max abs err ${sci(c.maxAbs)}, max rel err ${sci(c.maxRel)}`;
}
