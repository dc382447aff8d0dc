import { benchBaselines, benchModel, formatBenchRows } from '../../bench/index.js';
import { kernelDescription, resolveEngine } from '../../engine/index.js';
import { machineLine } from '../../engine/cpu-flags.js';
import { UsageError } from '../../errors.js';
import { readModelFile } from '../../format/index.js';
import { noExtraPositionals, parseArgs, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { ENGINE_FLAG, parseEngine } from './engine-flag.js';
import { reportFormat, writeBenchReport } from '../report-files.js';

const flags = {
  batch: { kind: 'string', help: 'comma-separated rows per call to measure', default: '1,32,256,1024' },
  engine: ENGINE_FLAG,
  ms: { kind: 'integer', help: 'measuring time per batch size, in milliseconds', default: 1000 },
  json: { kind: 'boolean', help: 'print the rows as JSON' },
  report: { kind: 'string', help: 'also time plain tfjs ops and the float64 reference on the same rows and write all as one HTML page (FILE.html)' },
} as const;

export const bench: Command = {
  name: 'bench',
  usage: 'tendon bench MODEL [--batch LIST] [--engine js|wasm|fast|int8|auto] [--ms N] [--json] [--report FILE.html]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const batches = (f.batch ?? '').split(',').map((part) => {
      const n = Number(part.trim());
      if (!Number.isInteger(n) || n < 1) throw new UsageError('--batch', `expected whole numbers >= 1 like 1,32,256; got "${part}"`);
      return n;
    });
    const minMs = f.ms ?? 1000;
    if (minMs < 1) throw new UsageError('--ms', `must be at least 1, got ${minMs}`);
    if (f.report) reportFormat(f.report, false);
    const { doc } = await readModelFile(path);
    // Baselines first: they run on the js backend, and the engine below switches to its own.
    const baselines = f.report ? await benchBaselines(doc, { batches, minMs }) : null;
    const choice = parseEngine(f.engine);
    // 'auto' measures what a service would get from openModel: int8 for an i8-stored model, else fast, else wasm, else js.
    const engine = choice === 'auto' ? (await resolveEngine('auto', doc)).engine : choice;
    const rows = await benchModel(doc, { batches, engine, minMs });
    // Figures mean little without the machine and the kernel behind them.
    if (!f.json) io.out(`${engine} engine: ${kernelDescription(engine)}${engine === 'fast' || engine === 'int8' ? ', one thread' : ''}; ${machineLine()}\n`);
    const text = f.json ? JSON.stringify(rows, null, 2) : formatBenchRows(rows);
    io.out(text.endsWith('\n') ? text : text + '\n');
    if (f.report && baselines) await writeBenchReport(f.report, path, rows, baselines);
    return 0;
  },
};
