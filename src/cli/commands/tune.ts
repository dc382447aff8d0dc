import { writeFile } from 'node:fs/promises';
import { UsageError } from '../../errors.js';
import { readModelFile, writeModelFile } from '../../format/index.js';
import { renderReport } from '../../train/report.js';
import { tune as tuneModel, type EpochRecord, type TuneRunOptions } from '../../train/tune.js';
import { ensureEngine, useEngine } from '../../engine/index.js';
import { buildModelFromSpecFile } from './pack.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional } from '../args.js';
import type { Command } from '../command.js';
import { grouped, percent, sci } from '../format.js';
import { progressLine } from '../progress.js';
import { loadTrainingData } from '../training-data.js';
import { parseEngine } from './engine-flag.js';

const flags = {
  data: { kind: 'string', short: 'd', help: 'training rows: .csv, .jsonl or .npy' },
  target: { kind: 'string', short: 't', help: 'target column(s) by name or 0-based position, comma-separated' },
  out: { kind: 'string', short: 'o', help: 'where to write the tuned model (the input model is never changed)' },
  epochs: { kind: 'integer', help: 'passes over the training rows', default: 10 },
  batch: { kind: 'integer', help: 'rows per update: 1 = stochastic, a large number = full batch', default: 32 },
  lr: { kind: 'number', help: 'learning rate (default 0.001 for adam, 0.01 otherwise)' },
  optimizer: { kind: 'string', help: 'sgd, momentum or adam', default: 'adam' },
  nesterov: { kind: 'boolean', help: "with momentum: Nesterov's look-ahead form" },
  'weight-decay': { kind: 'number', help: 'decoupled weight decay on dense weights' },
  schedule: { kind: 'string', help: 'learning-rate shape: constant, step or cosine', default: 'constant' },
  warmup: { kind: 'integer', help: 'updates of linear warm-up' },
  clip: { kind: 'number', help: 'clip the global gradient norm to this value' },
  seed: { kind: 'integer', help: 'seed of every random choice (init, shuffles, dropout, split)', default: 0 },
  holdout: { kind: 'number', help: 'fraction of rows held out for validation, in (0, 1)' },
  'holdout-file': { kind: 'string', help: 'separate validation rows (same columns as --data)' },
  'stop-after': { kind: 'integer', help: 'stop after this many epochs without a better hold-out loss; best weights kept' },
  freeze: { kind: 'string', help: 'layer indices to leave unchanged, e.g. 0,1' },
  anchor: { kind: 'number', help: 'pull towards the starting weights: strength x squared distance (limits forgetting)' },
  replay: { kind: 'string', help: 'earlier rows mixed into every batch (same columns as --data)' },
  'replay-share': { kind: 'number', help: 'replay rows per batch: a count, or a fraction of the batch', default: 0.25 },
  normalisation: { kind: 'string', help: 'a fitted normalise block: keep (frozen) or continue over the new rows', default: 'keep' },
  loss: { kind: 'string', help: 'override the loss chosen from the output activation' },
  report: { kind: 'string', help: 'write an SVG report: loss and accuracy curves, per-layer gradient norms' },
  log: { kind: 'string', help: 'per-epoch log: text or jsonl (default: text on a terminal, jsonl otherwise)' },
  'keep-interrupted': { kind: 'boolean', help: 'on Ctrl-C, save what is complete as OUT.interrupted' },
  engine: { kind: 'string', help: 'auto, fast, wasm or js', default: 'auto' },
} as const;

export const tune: Command = {
  name: 'tune',
  summary: 'train or fine-tune a model (a model file, or a JSON spec) on local data with mini-batch gradient descent',
  usage: 'tendon tune MODEL|SPEC.json --data FILE --target COLUMN[,COLUMN] -o OUT [--epochs N] [--batch K] [--lr X] [--optimizer sgd|momentum|adam] [--seed S] [--holdout FRACTION | --holdout-file FILE] [--freeze LAYERS] [--anchor STRENGTH] [--report FILE]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const modelPath = requirePositional(positionals, 0, 'the model file (or a JSON spec)');
    noExtraPositionals(positionals, 1);
    const dataPath = requireFlag(f.data, 'data');
    const targets = requireFlag(f.target, 'target').split(',').map((t) => t.trim()).filter(Boolean);
    const out = requireFlag(f.out, 'out');
    if (f.holdout !== undefined && f['holdout-file'] !== undefined) throw new UsageError('--holdout', 'give --holdout or --holdout-file, not both');
    const log = f.log ?? (io.interactive ? 'text' : 'jsonl');
    if (log !== 'text' && log !== 'jsonl') throw new UsageError('--log', `must be text or jsonl, got "${log}"`);
    const freeze = f.freeze === undefined ? undefined : parseIndices(f.freeze);

    const fromSpec = modelPath.toLowerCase().endsWith('.json');
    const parent = fromSpec ? null : await readModelFile(modelPath);
    const doc = parent ? parent.doc : await buildModelFromSpecFile(modelPath, { seed: f.seed });
    const data = await loadTrainingData(doc, dataPath, targets);
    const holdoutData = f['holdout-file'] ? await loadTrainingData(doc, f['holdout-file'], targets) : undefined;
    const replay = f.replay ? await loadTrainingData(doc, f.replay, targets) : undefined;
    const choice = parseEngine(f.engine);
    if (choice === 'int8') throw new UsageError('--engine', 'training runs in float32; int8 is an inference engine (use auto, fast, wasm or js)');
    // auto: tune picks the fast kernel when the model allows it; js / wasm: the tfjs engine path.
    if (choice === 'js' || choice === 'wasm') await useEngine(choice);
    else await useEngine('auto');
    const path = choice === 'js' || choice === 'wasm' ? 'engine' : choice === 'fast' ? 'fast' : undefined;

    const options: TuneRunOptions = {
      epochs: f.epochs,
      batch: f.batch,
      lr: f.lr,
      optimizer: f.optimizer,
      nesterov: f.nesterov || undefined,
      weightDecay: f['weight-decay'],
      schedule: f.schedule,
      warmup: f.warmup,
      clip: f.clip,
      seed: f.seed,
      holdout: f.holdout,
      holdoutData,
      stopAfter: f['stop-after'],
      freeze,
      anchor: f.anchor,
      replay,
      replayPerBatch: replay ? f['replay-share'] : undefined,
      normalisation: f.normalisation,
      loss: f.loss,
      parent: parent ? { checksum: parent.checksum, source: modelPath } : undefined,
      origin: parent ? undefined : `spec ${modelPath}`,
      path,
    };

    const bar = progressLine((t) => io.err(t), io.interactive && log === 'text');
    const started = performance.now();
    const say = (line: string) => {
      bar.clear();
      io.out(line + '\n');
    };
    if (log === 'text') say(`tuning ${modelPath} on ${grouped(data.rows)} rows of ${dataPath}`);
    const result = await tuneModel(doc, data, options, {
      signal: io.signal,
      onBatch: (p) => {
        const seconds = (performance.now() - started) / 1000;
        bar.update(`epoch ${p.epoch + 1}/${f.epochs ?? 10}  batch ${p.batch + 1}/${p.batches}  loss ${sci(p.loss)}  ${grouped(p.rows / Math.max(seconds, 1e-9))} rows/s`, (p.batch + 1) / p.batches);
      },
      onEpoch: (e) => (log === 'jsonl' ? io.out(JSON.stringify(epochJson(e)) + '\n') : say(epochText(e))),
    });
    bar.clear();

    for (const d of result.diagnostics) {
      const where = d.layer !== undefined ? ` (layer ${d.layer})` : '';
      const text = `warning${where}: ${d.message}${d.hint ? ` — hint: ${d.hint}` : ''}`;
      if (log === 'jsonl') io.out(JSON.stringify({ warning: d.code, layer: d.layer ?? null, epoch: d.epoch ?? null, message: d.message, hint: d.hint }) + '\n');
      else io.err(text + '\n');
    }
    if (f.report) {
      await writeFile(
        f.report,
        renderReport(
          `tendon tune ${modelPath}`,
          result.history.map((e) => ({
            epoch: e.epoch,
            trainLoss: e.train.loss,
            holdoutLoss: e.holdout?.loss ?? null,
            trainAccuracy: e.train.accuracy,
            holdoutAccuracy: e.holdout?.accuracy ?? null,
            gradientNorms: e.gradientNorms,
          })),
        ),
      );
    }
    if (result.aborted) {
      if (f['keep-interrupted']) {
        const partial = `${out}.interrupted`;
        await writeModelFile(partial, result.doc);
        io.err(`tendon: interrupted; saved the weights after the last complete batch as ${partial}; ${out} not written\n`);
      } else {
        io.err(`tendon: interrupted; nothing saved (${out} not written)\n`);
      }
      return 1;
    }
    const written = await writeModelFile(out, result.doc);
    const seconds = (performance.now() - started) / 1000;
    const ran = result.path === 'fast' ? 'the fast kernel' : result.path === 'engine' ? `the tfjs ${ensureEngine()} engine` : 'the float64 reference';
    const summary = `saved ${out} (checksum ${written.checksum}) after ${result.history.length} epochs in ${seconds.toFixed(1)} s on ${ran}; weights from epoch ${result.bestEpoch + 1}${result.stoppedEarly ? ' (stopped early)' : ''}`;
    if (log === 'jsonl') io.out(JSON.stringify({ saved: out, checksum: written.checksum, epochs: result.history.length, bestEpoch: result.bestEpoch, stoppedEarly: result.stoppedEarly, path: result.path }) + '\n');
    else io.out(summary + '\n');
    return 0;
  },
};

function parseIndices(text: string): number[] {
  return text.split(',').map((part) => {
    const t = part.trim();
    if (!/^\d+$/.test(t)) throw new UsageError('--freeze', `expected layer indices like 0,1; got "${part}"`);
    return Number(t);
  });
}

function epochText(e: EpochRecord): string {
  const parts = [`epoch ${String(e.epoch + 1).padStart(3)}`, `loss ${sci(e.train.loss)}`];
  if (e.train.accuracy !== null) parts.push(`accuracy ${percent(e.train.accuracy)}`);
  if (e.train.rmse !== null) parts.push(`rmse ${sci(e.train.rmse)}`);
  if (e.holdout) {
    parts.push(`| hold-out loss ${sci(e.holdout.loss)}`);
    if (e.holdout.accuracy !== null) parts.push(`accuracy ${percent(e.holdout.accuracy)}`);
    if (e.holdout.rmse !== null) parts.push(`rmse ${sci(e.holdout.rmse)} mae ${sci(e.holdout.mae ?? NaN)}`);
  }
  const norms = Object.entries(e.gradientNorms).map(([layer, n]) => `${layer}:${sci(n)}`);
  parts.push(`| grad norms ${norms.join(' ')}`);
  const dead = Object.entries(e.deadRelu).filter(([, share]) => share > 0);
  if (dead.length > 0) parts.push(`| dead ReLU ${dead.map(([l, s]) => `${l}:${percent(s, 0)}`).join(' ')}`);
  parts.push(`| ${grouped(e.rowsPerSecond)} rows/s`);
  return parts.join('  ');
}

function epochJson(e: EpochRecord) {
  return {
    epoch: e.epoch + 1,
    loss: e.train.loss,
    batchLoss: e.batchLoss,
    accuracy: e.train.accuracy,
    rmse: e.train.rmse,
    mae: e.train.mae,
    holdout: e.holdout ? { loss: e.holdout.loss, accuracy: e.holdout.accuracy, rmse: e.holdout.rmse, mae: e.holdout.mae, confusion: e.holdout.confusion } : null,
    gradientNorms: e.gradientNorms,
    deadRelu: e.deadRelu,
    lr: e.lr,
    updates: e.updates,
    rowsPerSecond: e.rowsPerSecond,
  };
}
