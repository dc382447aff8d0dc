import { availableParallelism } from 'node:os';
import { UsageError } from '../../errors.js';
import { openTableWriter } from '../../io/index.js';
import { DriftMonitor, describeDrift } from '../../drift/index.js';
import { openModel } from '../../tendon.js';
import type { Command } from '../command.js';
import { grouped } from '../format.js';
import { inputChunks, outputColumns, tableLayout } from '../model-input.js';
import { ENGINE_FLAG, parseEngine } from './engine-flag.js';
import { parseRowFileArgs, rowFileFlags } from './row-files.js';

/**
 * Rows read, scored and written at a time. Measured on a 40,000 x 784 float32 .npy (2-core EPYC,
 * Node 20, best of 3 interleaved; see the README's score section): 784-512-256-10 on fast x2,
 * int8 x2 and fast x1 ran 1.1-1.7x faster at 64-256 rows than at 4096, and the I/O-bound 784-2
 * model 1.7-3.7x faster at 256-1024 than at 4096. A 256-row chunk of 784 float32 inputs is 800 KB:
 * it is read into cache and copied into the engine's memory before it leaves it, where a
 * 4096-row chunk (12.8 MB) goes out to main memory and comes back. Below about 256 rows the
 * per-chunk costs (a read, a write, a hand-off to the threads) start to show.
 */
const DEFAULT_SCORE_BATCH = 256;

const flags = {
  ...rowFileFlags('score', 'the scores'),
  batch: { kind: 'integer', help: 'rows read, scored and written at a time (bounds memory)', default: DEFAULT_SCORE_BATCH },
  engine: ENGINE_FLAG,
  shard: { kind: 'string', help: 'K/N: score only the K-th (1-based) of N contiguous row ranges, for one task of an indexed batch job' },
  drift: { kind: 'boolean', help: "after scoring, print per-feature drift against the model's normalisation statistics to stderr" },
} as const;

export const score: Command = {
  name: 'score',
  usage: 'tendon score MODEL --input FILE --output FILE [--batch N] [--engine js|wasm|fast|int8|auto] [--shard K/N] [--drift]',
  flags,
  async run(argv, io) {
    const { flags: f, path, input, output } = parseRowFileArgs(argv, flags);
    const batch = f.batch ?? DEFAULT_SCORE_BATCH;
    if (batch < 1) throw new UsageError('--batch', `must be at least 1, got ${batch}`);
    const shard = f.shard === undefined ? null : parseShard(f.shard);
    // Every core: the fast and int8 engines split each batch's rows across threads (the tfjs engines run on one).
    // The engine keeps its own pass size (rows whose activations stay in cache); --batch is how many rows are read and written at a time.
    const model = await openModel(path, { engine: parseEngine(f.engine), threads: availableParallelism() });
    try {
      const drift = f.drift ? DriftMonitor.forModel(model.doc) : null;
      if (f.drift && !drift) io.err('tendon score: --drift: the model has no fitted normalisation statistics to compare with\n');
      const writer = await openTableWriter(output, outputColumns(model.doc, model.outputs));
      let rows = 0;
      const started = performance.now();
      let part = '';
      try {
        // Each chunk is scored and written before the next is asked for, so the reader may reuse its buffers.
        let chunks = inputChunks(model.doc, input, batch, { reuse: true });
        if (shard) {
          // The row count decides the ranges: an NPY header declares it; other files get a first pass that counts the rows.
          let total = (await tableLayout(input)).rowsTotal ?? 0;
          if (total === 0) for await (const chunk of inputChunks(model.doc, input, batch)) total += chunk.rows;
          const range = shardRange(shard, total);
          part = ` (part ${shard.k} of ${shard.n}: rows ${range.start + 1}..${range.end} of ${grouped(total)})`;
          chunks = rowRange(chunks, range.start, range.end);
        }
        for await (const chunk of chunks) {
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
      io.err(`scored ${grouped(rows)} rows${part} into ${output} in ${seconds.toFixed(2)} s on the ${model.engine} engine (${model.kernel})\n`);
      if (drift) io.err(describeDrift(drift.report()));
      return 0;
    } finally {
      model.dispose();
    }
  },
};

/** A shard K of N, 1-based. */
interface Shard {
  readonly k: number;
  readonly n: number;
}

/** '--shard 2/5' -> { k: 2, n: 5 }; anything else is a usage error. */
function parseShard(text: string): Shard {
  const m = /^(\d+)\/(\d+)$/.exec(text.trim());
  if (!m) throw new UsageError('--shard', `expected K/N such as 2/5 (part K of N, counted from 1), got ${JSON.stringify(text)}`);
  const k = Number(m[1]);
  const n = Number(m[2]);
  if (!Number.isSafeInteger(n) || n < 1) throw new UsageError('--shard', `N must be at least 1, got ${m[2]}`);
  if (!Number.isSafeInteger(k) || k < 1 || k > n) throw new UsageError('--shard', `K must be 1 to ${n} (parts are counted from 1), got ${m[1]}`);
  return { k, n };
}

/**
 * Rows [start, end) of part K of N over `total` rows: contiguous, in order, covering every row
 * once, sizes differing by at most one (the first floor((K-1)·total/N) rows belong to earlier parts).
 * @example shardRange({ k: 2, n: 3 }, 10) // { start: 3, end: 6 }
 */
export function shardRange(shard: Shard, total: number): { start: number; end: number } {
  return { start: Math.floor(((shard.k - 1) * total) / shard.n), end: Math.floor((shard.k * total) / shard.n) };
}

/** The rows [start, end) of a chunk stream, cut at chunk edges; stops reading past `end`. */
async function* rowRange(
  chunks: AsyncGenerator<{ rows: number; x: Float32Array; firstLine: number }>,
  start: number,
  end: number,
): AsyncGenerator<{ rows: number; x: Float32Array; firstLine: number }> {
  let at = 0;
  for await (const chunk of chunks) {
    const width = chunk.x.length / chunk.rows;
    const from = Math.max(start, at) - at;
    const to = Math.min(end, at + chunk.rows) - at;
    if (to > from) yield { rows: to - from, x: chunk.x.subarray(from * width, to * width), firstLine: chunk.firstLine + from };
    at += chunk.rows;
    if (at >= end) break;
  }
}
