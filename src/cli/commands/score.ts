import { availableParallelism } from 'node:os';
import { UsageError } from '../../errors.js';
import { openTableWriter } from '../../io/index.js';
import { DriftMonitor, describeDrift } from '../../drift/index.js';
import { openModel } from '../../tendon.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { grouped } from '../format.js';
import { inputChunks, outputColumns } from '../model-input.js';
import { parseEngine } from './engine-flag.js';

const flags = {
  input: { kind: 'string', short: 'i', help: 'rows to score: .csv, .jsonl or .npy (2-D)' },
  output: { kind: 'string', short: 'o', help: 'where to write the scores: .csv, .jsonl or .npy' },
  batch: { kind: 'integer', help: 'rows read and scored at a time (bounds memory)', default: 4096 },
  engine: { kind: 'string', help: 'auto, fast, int8, wasm or js', default: 'auto' },
  drift: { kind: 'boolean', help: 'after scoring, print per-feature drift against the model\'s normalisation statistics to stderr' },
} as const;

export const score: Command = {
  name: 'score',
  summary: 'score a data file with a model, streaming, one output row per input row',
  usage: 'tendon score MODEL --input FILE --output FILE [--batch N] [--engine js|wasm|fast|int8|auto] [--drift]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const path = requirePositional(positionals, 0, 'the model file');
    noExtraPositionals(positionals, 1);
    const input = requireFlag(f.input, 'input');
    const output = requireFlag(f.output, 'output');
    const batch = f.batch ?? 4096;
    if (batch < 1) throw new UsageError('--batch', `must be at least 1, got ${batch}`);
    // Every core: the int8 engine splits each batch's rows across threads (the others run on one).
    const model = await openModel(path, { engine: parseEngine(f.engine), chunkRows: Math.min(batch, 4096), threads: availableParallelism() });
    try {
      const drift = f.drift ? DriftMonitor.forModel(model.doc) : null;
      if (f.drift && !drift) io.err('tendon score: --drift: the model has no fitted normalisation statistics to compare with\n');
      const writer = await openTableWriter(output, outputColumns(model.doc, model.outputs));
      let rows = 0;
      const started = performance.now();
      try {
        for await (const chunk of inputChunks(model.doc, input, batch)) {
          await writer.write(chunk.rows, model.run(chunk.x, chunk.rows));
          drift?.add(chunk.x, chunk.rows);
          rows += chunk.rows;
        }
        await writer.close();
      } catch (error) {
        await writer.abort();
        throw error;
      }
      const seconds = (performance.now() - started) / 1000;
      io.err(`scored ${grouped(rows)} rows into ${output} in ${seconds.toFixed(2)} s on the ${model.engine} engine (${model.kernel})\n`);
      if (drift) io.err(describeDrift(drift.report()));
      return 0;
    } finally {
      model.dispose();
    }
  },
};
