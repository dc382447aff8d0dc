import { bestInt8Arith, kernelDescription } from '../../engine/index.js';
import { readModelFile } from '../../format/index.js';
import { modelFacts, type ModelFacts } from '../../model/facts.js';
import { noExtraPositionals, parseArgs, requirePositional } from '../args.js';
import { describeStorageCosts, storageCost } from '../../transform/index.js';
import type { Command } from '../command.js';
import { bytesText, grouped, namesText, sci, textTable } from '../format.js';

const flags = {
  json: { kind: 'boolean', help: 'print the facts as one JSON object' },
  costs: { kind: 'boolean', help: 'also measure the size and parity cost of each storage choice (f32, f16, i8)' },
} as const;

export const about: Command = {
  name: 'about',
  usage: 'tendon about MODEL [--json] [--costs]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const read = await readModelFile(path);
    const facts = modelFacts(read.doc, { path, checksum: read.checksum, bytes: read.bytes, version: `${read.version.major}.${read.version.minor}` });
    const costs = f.costs ? storageCost(read.doc) : null;
    // What `--engine auto` runs this file on here: int8 for an i8-stored model, else the float32 kernel.
    const engine = read.doc.storage === 'i8' && bestInt8Arith() !== null ? 'int8' : 'fast';
    const runs = { engine, kernel: kernelDescription(engine) };
    const line = `engine under --engine auto: ${runs.engine} (${runs.kernel})\n`;
    io.out(
      f.json
        ? JSON.stringify({ ...facts, runs, ...(costs ? { storageCosts: costs } : {}) }, null, 2) + '\n'
        : describe(facts) + line + (costs ? '\n' + describeStorageCosts(costs) : ''),
    );
    return 0;
  },
};

/** The table's footer: values training changes, and stored values it leaves alone (batchnorm running statistics). */
function learnedAndFixed(f: ModelFacts): string {
  const stored = f.layers.reduce((n, l) => n + l.tensors.reduce((m, t) => m + t.shape.reduce((a, b) => a * b, 1), 0), 0);
  const fixed = stored - f.parameters;
  return `${grouped(f.parameters)} weights to learn` + (fixed > 0 ? `, ${grouped(fixed)} held fixed (batchnorm running statistics)` : '');
}

function describe(f: ModelFacts): string {
  const lines: string[] = [];
  if (f.file) lines.push(`${f.file.path}  ${bytesText(f.file.bytes)}  format ${f.file.formatVersion}  checksum ${f.file.checksum}`);
  if (f.name || f.description) lines.push(`${f.name}${f.description ? ` — ${f.description}` : ''}`);
  lines.push(`created ${f.created || '(unknown)'}; weights stored as ${f.storage}`);
  lines.push(f.features ? namesText(`inputs ${f.inputs}: `, f.features) : `inputs ${f.inputs}`);
  lines.push(f.labels ? namesText(`outputs ${f.outputs}: `, f.labels) : `outputs ${f.outputs}`);
  if (f.temperature !== null) lines.push(`calibration temperature ${f.temperature} (logits divided by it before the output activation)`);
  if (f.targetScaling) {
    const each = f.targetScaling.mean.map((m, j) => `${f.labels?.[j] ?? `output ${j}`} mean ${sci(m)} sd ${sci(f.targetScaling!.std[j])}`);
    lines.push(namesText('targets scaled inside the model (answers = last layer x sd + mean): ', each));
  }
  if (f.activationRanges) {
    const each = f.activationRanges.layers.map((r) => `layers[${r.layer}] [${sci(r.min)}, ${sci(r.max)}]`);
    lines.push(namesText(`int8 activation ranges from ${grouped(f.activationRanges.rows)} rows (each dense layer's input): `, each));
  }
  lines.push(
    f.normalise
      ? `normalisation ${f.normalise.method}, ${f.normalise.fitted ? `fitted over ${grouped(f.normalise.rowsSeen)} rows` : 'not fitted yet (fitted from data on the first tune)'}`
      : 'normalisation none (callers must pass features on a sensible scale)',
  );
  lines.push('');
  lines.push(
    textTable(
      ['#', 'layer', 'in', 'out', 'parameters', 'tensors'],
      f.layers.map((l) => [
        String(l.index),
        `${l.kind} ${l.detail}`,
        String(l.inputs),
        String(l.outputs),
        grouped(l.parameters),
        l.tensors.map((t) => `${t.name.split('.').pop()} [${t.shape.join('x')}]`).join(' ') || '—',
      ]),
    ).trimEnd(),
  );
  lines.push(learnedAndFixed(f));
  if (f.provenance.length > 0) {
    lines.push('', 'provenance:');
    for (const p of f.provenance) lines.push(`  ${p.at}  ${p.action} from ${p.source} (checksum ${p.checksum})`);
  }
  const extra = Object.entries(f.extra);
  if (extra.length > 0) lines.push('', ...extra.map(([k, v]) => `${k}: ${v}`));
  return lines.join('\n') + '\n';
}
