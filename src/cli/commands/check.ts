import { INT8_SIGMAS, randomInputs, type ParityReport } from '../../check/index.js';
import { UsageError } from '../../errors.js';
import { readModelFile } from '../../format/index.js';
import { compareOutputs, SHRINK_TOLERANCE, type OutputComparison } from '../../transform/index.js';
import { openModel, type TendonModel } from '../../tendon.js';
import { noExtraPositionals, parseArgs, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { percent, sci, textTable } from '../format.js';
import { inputChunks } from '../model-input.js';
import { parseEngine } from './engine-flag.js';

const flags = {
  input: { kind: 'string', short: 'i', help: 'rows to check on (.csv, .jsonl, .npy); default: seeded random rows' },
  rows: { kind: 'integer', help: 'random rows when no --input is given', default: 256 },
  seed: { kind: 'integer', help: 'seed for the random rows', default: 1 },
  engine: { kind: 'string', help: 'auto, fast, int8, wasm or js', default: 'auto' },
  json: { kind: 'boolean', help: 'print the report as JSON' },
  against: { kind: 'string', help: 'judge MODEL against its parent file instead (both on the float64 reference path; tolerance by MODEL\'s storage)' },
} as const;

/** At most this many rows of an input file are checked: the float64 reference is slow by design. */
const MAX_CHECK_ROWS = 100_000;

export const check: Command = {
  name: 'check',
  summary: 'prove the engine against the float64 reference, per layer and at the output (exit 1 if a tolerance breaks)',
  usage: 'tendon check MODEL [--input FILE] [--rows N] [--json] [--engine js|wasm|fast|int8|auto] [--against PARENT]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const rows = f.rows ?? 256;
    if (rows < 1) throw new UsageError('--rows', `must be at least 1, got ${rows}`);
    if (f.against) return checkAgainst(path, f.against, rows, f.seed ?? 1, f.input, f.json, io);
    const model = await openModel(path, { engine: parseEngine(f.engine) });
    try {
      const input = f.input ? await readInput(model, f.input) : undefined;
      const report = model.check(input ?? { x: randomInputs(model.doc, rows, f.seed ?? 1), rows });
      if (f.json) io.out(JSON.stringify({ model: path, engine: model.engine, kernel: model.kernel, ...report }, null, 2) + '\n');
      else io.out(describeParity(report, `${path} on the ${model.engine} engine (${model.kernel}), ${report.output.rows} rows${f.input ? ` from ${f.input}` : ' (seeded random, not representative of real inputs)'}`, model.engine === 'int8'));
      return report.pass ? 0 : 1;
    } finally {
      model.dispose();
    }
  },
};

async function readInput(model: Pick<TendonModel, 'doc' | 'inputs'>, file: string): Promise<{ x: Float32Array; rows: number }> {
  const parts: Float32Array[] = [];
  let rows = 0;
  for await (const chunk of inputChunks(model.doc, file, 4096)) {
    const take = Math.min(chunk.rows, MAX_CHECK_ROWS - rows);
    parts.push(chunk.x.subarray(0, take * model.inputs));
    rows += take;
    if (rows >= MAX_CHECK_ROWS) break;
  }
  const x = new Float32Array(rows * model.inputs);
  let at = 0;
  for (const p of parts) {
    x.set(p, at);
    at += p.length;
  }
  return { x, rows };
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

/** `check MODEL --against PARENT`: the two models' outputs on the same rows, both on the float64 reference path. */
async function checkAgainst(path: string, parentPath: string, rows: number, seed: number, input: string | undefined, json: boolean, io: { out(t: string): void }): Promise<number> {
  const [child, parent] = await Promise.all([readModelFile(path), readModelFile(parentPath)]);
  // Rows are drawn around the PARENT's statistics: a folded child no longer keeps its own.
  const x = input ? await readInput({ doc: parent.doc, inputs: parent.doc.inputs }, input) : { x: randomInputs(parent.doc, rows, seed), rows };
  const tolerance = SHRINK_TOLERANCE[child.doc.storage];
  const c: OutputComparison = compareOutputs(parent.doc, child.doc, x.x, x.rows, tolerance);
  if (json) {
    io.out(JSON.stringify({ model: path, against: parentPath, storage: child.doc.storage, ...c }, null, 2) + '\n');
  } else {
    io.out(
      `${path} (${child.doc.storage}, ${child.doc.layers.length} layers) against ${parentPath} (${parent.doc.storage}, ${parent.doc.layers.length} layers), ` +
        `${c.rows} rows${input ? ` from ${input}` : ' (seeded random)'}, float64 reference path for both\n` +
        `tolerance for ${child.doc.storage} storage: abs ${tolerance.abs}, rel ${tolerance.rel}\n` +
        `max abs err ${sci(c.maxAbs)}, max rel err ${sci(c.maxRel)}${c.pass ? '' : ` (worst at row ${c.worstRow}, column ${c.worstCol})`}\n` +
        (c.topClassAgreement === null ? '' : `top class agrees on ${percent(c.topClassAgreement, 2)} of rows\n`) +
        `${c.pass ? 'PASS' : 'FAIL'}: ${c.pass ? 'within the tolerance' : 'the tolerance is broken'}\n`,
    );
  }
  return c.pass ? 0 : 1;
}
