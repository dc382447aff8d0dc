import { DivergenceError, UsageError } from '../../errors.js';
import { readModelFile, writeModelFile } from '../../format/index.js';
import { CALIBRATION_CAUTION, ECE_BINS, type TemperatureFit } from '../../train/calibration.js';
import { tune as tuneModel, TuneDivergence, type EpochRecord, type TuneResult, type TuneRunOptions } from '../../train/tune.js';
import { ensureEngine, useEngine } from '../../engine/index.js';
import { buildModelFromSpecFile } from './pack.js';
import { noExtraPositionals, parseArgs, requireFlag, requirePositional, type FlagValues } from '../args.js';
import type { Command, Io } from '../command.js';
import type { ModelDoc } from '../../model/index.js';
import { grouped, percent, sci } from '../format.js';
import { progressLine } from '../progress.js';
import { reportFormat, writeTuneReport } from '../report-files.js';
import { loadTrainingData } from '../training-data.js';
import { headerFeatureNames, inFlagTerms, refuseOverwritingInputs } from '../tune-guards.js';
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
  'raw-targets': {
    kind: 'boolean',
    help: 'regression: train on the targets as given (default: each target scaled to mean 0, sd 1 inside the model; answers stay in target units)',
  },
  report: {
    kind: 'string',
    help: 'FILE.html: the whole run as one page (curves, confusion, per-class results, gradients, findings); FILE.svg: the curves alone',
  },
  log: { kind: 'string', help: 'per-epoch log: text or jsonl (default: text on a terminal, jsonl otherwise)' },
  calibrate: { kind: 'boolean', help: 'after training, fit a calibration temperature on the hold-out rows and store it (needs --holdout or --holdout-file)' },
  'keep-interrupted': { kind: 'boolean', help: 'on Ctrl-C, save what is complete as OUT.interrupted' },
  engine: { kind: 'string', help: 'auto, fast, wasm or js', default: 'auto' },
} as const;

export const tune: Command = {
  name: 'tune',
  usage:
    'tendon tune MODEL|SPEC.json --data FILE --target COLUMN[,COLUMN] -o OUT [--epochs N] [--batch K] [--lr X] [--optimizer sgd|momentum|adam] [--seed S] [--holdout FRACTION | --holdout-file FILE] [--freeze LAYERS] [--anchor STRENGTH] [--calibrate] [--report FILE]',
  flags,
  async run(argv, io) {
    const { flags: f, positionals } = parseArgs(argv, flags);
    const modelPath = requirePositional(positionals, 0, 'the model file (or a JSON spec)');
    noExtraPositionals(positionals, 1);
    const dataPath = requireFlag(f.data, 'data');
    const targets = requireFlag(f.target, 'target')
      .split(',')
      .map((t) => t.trim())
      .filter(Boolean);
    const out = requireFlag(f.out, 'out');
    if (f.holdout !== undefined && f['holdout-file'] !== undefined) throw new UsageError('--holdout', 'give --holdout or --holdout-file, not both');
    if (f.calibrate && f.holdout === undefined && f['holdout-file'] === undefined) {
      throw new UsageError('--calibrate', 'needs hold-out rows to fit the temperature on: add --holdout FRACTION or --holdout-file FILE');
    }
    const log = f.log ?? (io.interactive ? 'text' : 'jsonl');
    if (log !== 'text' && log !== 'jsonl') throw new UsageError('--log', `must be text or jsonl, got "${log}"`);
    const freeze = f.freeze === undefined ? undefined : parseIndices(f.freeze);
    if (f.report) reportFormat(f.report, true);

    const fromSpec = modelPath.toLowerCase().endsWith('.json');
    await refuseOverwritingInputs(out, [
      { path: modelPath, what: fromSpec ? 'spec' : 'input model' },
      { path: dataPath, what: 'training data' },
      { path: f['holdout-file'], what: 'hold-out data' },
      { path: f.replay, what: 'replay data' },
    ]);
    const parent = fromSpec ? null : await readModelFile(modelPath);
    const doc = parent ? parent.doc : await buildModelFromSpecFile(modelPath, { seed: f.seed });
    const data = await loadTrainingData(doc, dataPath, targets, (m) => io.err(`tendon tune: warning: ${m}\n`));
    // A model without feature names (from a spec or a packed file) learns them from the header,
    // so it can score the same file later (its target column then told apart by name).
    if (!doc.features) doc.features = await headerFeatureNames(dataPath, targets, doc.inputs);
    const holdoutData = f['holdout-file'] ? await loadTrainingData(doc, f['holdout-file'], targets) : undefined;
    const replay = f.replay ? await loadTrainingData(doc, f.replay, targets) : undefined;
    const path = await trainingPath(f.engine);

    const options = runOptions(f, { modelPath, parent, holdoutData, replay, freeze, path });

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
        bar.update(
          `epoch ${p.epoch + 1}/${f.epochs ?? 10}  batch ${p.batch + 1}/${p.batches}  loss ${sci(p.loss)}  ${grouped(p.rows / Math.max(seconds, 1e-9))} rows/s`,
          (p.batch + 1) / p.batches,
        );
      },
      onEpoch: (e) => (log === 'jsonl' ? io.out(JSON.stringify(epochJson(e)) + '\n') : say(epochText(e))),
    }).catch((error: unknown) => {
      bar.clear();
      if (error instanceof TuneDivergence) {
        throw new DivergenceError(error.epoch, error.batch, error.layer, error.detail, `nothing saved (${out} not written); try a lower --lr or --clip`);
      }
      throw inFlagTerms(error);
    });
    bar.clear();

    printDiagnostics(result.diagnostics, log, io);
    if (f.report) await writeTuneReport(f.report, modelPath, result, result.calibration ? [calibrationText(result.calibration)] : []);
    if (result.aborted) return saveInterrupted(out, result.doc, f['keep-interrupted'], io);
    const written = await writeModelFile(out, result.doc);
    const seconds = (performance.now() - started) / 1000;
    const ran = result.path === 'fast' ? 'the fast kernel' : result.path === 'engine' ? `the tfjs ${ensureEngine()} engine` : 'the float64 reference';
    const summary = `saved ${out} (checksum ${written.checksum}) after ${result.history.length} epochs in ${seconds.toFixed(1)} s on ${ran}; weights from epoch ${result.bestEpoch + 1}${result.stoppedEarly ? ' (stopped early)' : ''}`;
    const c = result.calibration;
    if (log === 'jsonl') {
      const calibration = c
        ? {
            stored: !c.atBound,
            temperature: c.temperature,
            atBound: c.atBound,
            rows: c.rows,
            nllBefore: c.nllBefore,
            nllAfter: c.nllAfter,
            eceBefore: c.eceBefore,
            eceAfter: c.eceAfter,
            bins: ECE_BINS,
          }
        : null;
      io.out(
        JSON.stringify({
          saved: out,
          checksum: written.checksum,
          epochs: result.history.length,
          bestEpoch: result.bestEpoch + 1,
          stoppedEarly: result.stoppedEarly,
          path: result.path,
          calibration,
          droppedTemperature: result.droppedTemperature,
        }) + '\n',
      );
    } else {
      io.out(summary + '\n');
      if (c) io.out(`${calibrationText(c)}\n${c.atBound ? '' : `note: ${CALIBRATION_CAUTION}\n`}`);
    }
    if (result.droppedTemperature !== null) {
      io.err(
        `note: the input model's calibration temperature ${result.droppedTemperature.toFixed(4)} was dropped: it was fitted to the old weights; add --calibrate to fit a new one\n`,
      );
    }
    return 0;
  },
};

/** The engine flag as a training path; also loads the engine evaluation runs on. */
async function trainingPath(engine: string | undefined): Promise<TuneRunOptions['path']> {
  const choice = parseEngine(engine);
  if (choice === 'int8') throw new UsageError('--engine', 'training runs in float32; int8 is an inference engine (use auto, fast, wasm or js)');
  // auto: tune picks the fast kernel when the model allows it; js / wasm: the tfjs engine path.
  if (choice === 'js' || choice === 'wasm') await useEngine(choice);
  else await useEngine('auto');
  return choice === 'js' || choice === 'wasm' ? 'engine' : choice === 'fast' ? 'fast' : undefined;
}

/** The flags as tune options, with the rows and settings read before. */
function runOptions(
  f: FlagValues<typeof flags>,
  read: {
    modelPath: string;
    parent: { checksum: string } | null;
    holdoutData: TuneRunOptions['holdoutData'];
    replay: TuneRunOptions['replay'];
    freeze: number[] | undefined;
    path: TuneRunOptions['path'];
  },
): TuneRunOptions {
  const { modelPath, parent, holdoutData, replay, freeze, path } = read;
  return {
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
    scaleTargets: !f['raw-targets'],
    parent: parent ? { checksum: parent.checksum, source: modelPath } : undefined,
    origin: parent ? undefined : `spec ${modelPath}`,
    path,
    calibrate: f.calibrate || undefined,
  };
}

/** One line: the fitted temperature and the hold-out calibration error and NLL before and after. */
function calibrationText(c: TemperatureFit): string {
  if (c.atBound) {
    return (
      `calibration: no temperature stored: on ${grouped(c.rows)} hold-out rows the likelihood has no best T inside [0.01, 100] ` +
      `(it kept improving towards ${c.temperature.toFixed(2)}${c.temperature < 1 ? ', as it does when every hold-out row is classified right' : ''}); ` +
      'hold out more rows, or rows the model finds harder'
    );
  }
  return (
    `calibration: temperature ${c.temperature.toFixed(4)} fitted on ${grouped(c.rows)} hold-out rows; ` +
    `calibration error (ECE, ${ECE_BINS} bins) ${c.eceBefore.toFixed(4)} -> ${c.eceAfter.toFixed(4)}, hold-out NLL ${c.nllBefore.toFixed(4)} -> ${c.nllAfter.toFixed(4)}`
  );
}

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
    holdout: e.holdout
      ? { loss: e.holdout.loss, accuracy: e.holdout.accuracy, rmse: e.holdout.rmse, mae: e.holdout.mae, confusion: e.holdout.confusion }
      : null,
    gradientNorms: e.gradientNorms,
    deadRelu: e.deadRelu,
    lr: e.lr,
    updates: e.updates,
    rowsPerSecond: e.rowsPerSecond,
  };
}

/** Training warnings: on stderr as text, or as JSON lines among the epoch records. */
function printDiagnostics(diagnostics: TuneResult['diagnostics'], log: 'text' | 'jsonl', io: Io): void {
  for (const d of diagnostics) {
    const where = d.layer !== undefined ? ` (layer ${d.layer})` : '';
    const text = `warning${where}: ${d.message}${d.hint ? ` — hint: ${d.hint}` : ''}`;
    // Epochs are counted from 1 wherever the command line shows them.
    if (log === 'jsonl')
      io.out(
        JSON.stringify({ warning: d.code, layer: d.layer ?? null, epoch: d.epoch === undefined ? null : d.epoch + 1, message: d.message, hint: d.hint }) + '\n',
      );
    else io.err(text + '\n');
  }
}

/** Ctrl-C: OUT is never written; with --keep-interrupted the weights so far go to OUT.interrupted. Exit code 1. */
async function saveInterrupted(out: string, doc: ModelDoc, keep: boolean, io: Io): Promise<number> {
  if (keep) {
    const partial = `${out}.interrupted`;
    await writeModelFile(partial, doc);
    io.err(`tendon: interrupted; saved the weights after the last complete batch as ${partial}; ${out} not written\n`);
  } else {
    io.err(`tendon: interrupted; nothing saved (${out} not written)\n`);
  }
  return 1;
}
