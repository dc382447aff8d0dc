/**
 * The tune loop: mini-batch gradient descent on a copy of a model document.
 *
 * Per epoch: a fresh seeded shuffle cut into ceil(n / k) batches; per batch: training forward
 * (seeded dropout masks, batch statistics in batch normalisation), loss, backward, anchor
 * penalty, clipping, optimiser step (weight decay inside it), running-statistics update,
 * kernel refresh. After each epoch: evaluation of the training and hold-out rows in inference
 * mode, diagnostics, early stopping. Everything random draws from generators seeded by
 * `seed`, so a run repeats bit for bit.
 *
 * This file reads as the algorithm; its parts live beside it: run-setup (before the first
 * batch), tune-data (rows and batches), param-slots (what a step changes), finite-checks
 * (divergence), split-eval and epoch-findings (what an epoch reports), doc-copies (snapshots).
 */
import { TuneConfigError } from '../errors.js';
import { SeededRng, modelWidths, validateModel, type ForwardContext, type ModelDoc, type TargetScaling } from '../model/index.js';
import { referenceLogits } from '../reference/index.js';
import { makeBackend, type TrainBackend, type TrainPath } from './backends.js';
import { classLogits, fitTemperature, type TemperatureFit } from './calibration.js';
import { clipGlobalNorm } from './clip.js';
import { resolveTuneOptions, type ResolvedTuneOptions, type TuneData } from './config.js';
import { constantFeatures, linearStacks } from './diagnostics.js';
import { cloneDoc, mutableArrays, restore, snapshot } from './doc-copies.js';
import { DiagnosticLog, epochFindings } from './epoch-findings.js';
import { firstBrokenSlot, firstNonFiniteLayer, layerLabel, layerSquaredNorms } from './finite-checks.js';
import { computeLoss, lossFor, type LossSpec } from './losses.js';
import { makeOptimiser, type Optimiser } from './optimisers.js';
import { anchorStarts, changedLayers, slotsOf, stepGradients, updateRunningStatistics, type Slot } from './param-slots.js';
import {
  checkPath,
  choosePath,
  initialiseEmpty,
  outputActivation,
  outputLayerEmpty,
  prepareNormalisation,
  prepareTargetScaling,
  scaledTargets,
  streams,
  trainingContext,
  tuneProvenance,
} from './run-setup.js';
import { rateAt } from './schedule.js';
import { epochBatches } from './shuffle.js';
import { evaluateSplit, hiddenReluLayers } from './split-eval.js';
import { BatchGatherer, runRows, targetsOf } from './tune-data.js';
import { TuneDivergence, type EpochRecord, type TuneHooks, type TuneResult, type TuneRunOptions } from './tune-types.js';

export { cloneDoc } from './doc-copies.js';
export type { SplitMetrics } from './split-eval.js';
export { TuneDivergence, type BatchProgress, type EpochRecord, type TuneHooks, type TuneResult, type TuneRunOptions } from './tune-types.js';

/** Hold-out loss must improve by more than this (relative) to count as better. */
const IMPROVEMENT = 1e-9;

/**
 * Train (or fine-tune) `doc` on `data` and return a new document.
 *
 * @example
 * const { doc: tuned, history } = await tune(doc, { x, rows, y: classes }, { epochs: 20, batch: 16, lr: 0.01, seed: 1, holdout: 0.2 });
 * @throws TuneConfigError for bad options, DataError for a class the model does not know,
 *   ModelFileError for an unusable document, DivergenceError when a loss or gradient goes non-finite.
 */
export async function tune(doc: ModelDoc, data: TuneData, options: TuneRunOptions = {}, hooks: TuneHooks = {}): Promise<TuneResult> {
  // Settle the run: options, a working copy with starting values, the loss, the rows.
  const opts = resolveTuneOptions(options, doc);
  checkPath(options.path);
  const rng = streams(opts.seed);

  // The steps train the raw logits: a stored temperature is set aside, then refitted on the
  // hold-out rows (calibrate) or dropped, since it was fitted to the old weights.
  const work = cloneDoc(doc);
  const parentTemperature = work.temperature ?? null;
  delete work.temperature;
  // Int8 activation ranges describe the old weights (and normalisation): a run changes both.
  delete work.activationRanges;
  const freshOutput = outputLayerEmpty(work);
  initialiseEmpty(work, rng.init);
  validateModel(work, work.meta.name || '(model)');
  const widths = modelWidths(work);
  const outputs = widths[widths.length - 1];
  const spec = lossFor(outputActivation(work), opts.loss ?? undefined);
  const last = work.layers[work.layers.length - 1];
  if (spec.input === 'logits' && last.kind !== 'dense') {
    throw new TuneConfigError('loss', `${spec.name} reads logits, which needs a dense last layer; layers[${work.layers.length - 1}] is ${last.kind}`);
  }
  const classifier = data.y instanceof Int32Array;
  if (opts.calibrate && !classifier) throw new TuneConfigError('calibrate', 'a temperature is fitted to class targets; these targets are values');
  const rowsAsGiven = runRows(data, opts, work.inputs, outputs, rng.split);

  // Regression targets scaled inside the model: the loop trains on z = (y - mean) / std with the
  // scaling set aside (so every path runs the bare layers), and the result stores it again.
  const scaling = prepareTargetScaling(work, rowsAsGiven.train, outputs, opts.scaleTargets, freshOutput);
  work.targetScaling = null;
  const withScaling = (d: ModelDoc): ModelDoc => (scaling ? { ...d, targetScaling: scaling } : d);
  const train = scaledTargets(rowsAsGiven.train, scaling);
  const held = rowsAsGiven.held && scaledTargets(rowsAsGiven.held, scaling);
  const replay = rowsAsGiven.replay && scaledTargets(rowsAsGiven.replay, scaling);

  const { path, fallback } = choosePath(options.path, work);
  const stacks = linearStacks(work.layers);
  const raw = prepareNormalisation(work, train, opts.normalisation);
  const log = new DiagnosticLog([fallback, ...stacks, raw, constantFeatures(work.normalise, work.features)]);

  const run = prepareSteps({ opts, spec, work, train, held, replay, outputs, classifier, scaling, withScaling, log, hooks, rng }, path);
  const { history, bestEpoch, stoppedEarly, aborted } = await runEpochs(run);
  const calibration = calibrateOnHoldout(run, aborted);

  if (scaling) work.targetScaling = scaling;
  const lineage = tuneProvenance(doc, options.parent, options.origin);
  if (lineage) work.provenance.push({ ...lineage, at: new Date().toISOString() });
  const droppedTemperature = calibration === null ? parentTemperature : null;
  return { doc: work, history, diagnostics: log.list, stoppedEarly, bestEpoch, aborted, loss: spec, path, calibration, droppedTemperature };
}

/** What the run settled before the steps: options, loss, working copy, rows, diagnostics. */
interface RunBasis {
  readonly opts: ResolvedTuneOptions;
  readonly spec: LossSpec;
  readonly work: ModelDoc;
  readonly train: TuneData;
  readonly held: TuneData | null;
  readonly replay: TuneData | null;
  readonly outputs: number;
  readonly classifier: boolean;
  readonly scaling: TargetScaling | null;
  readonly withScaling: (d: ModelDoc) => ModelDoc;
  readonly log: DiagnosticLog;
  readonly hooks: TuneHooks;
  readonly rng: ReturnType<typeof streams>;
}

/** Everything each step reads and changes; `step` counts optimiser steps across epochs. */
interface StepRun extends RunBasis {
  readonly slots: Slot[];
  readonly anchorStart: (Float64Array | null)[] | null;
  readonly optimiser: Optimiser;
  readonly gradientsChange: boolean;
  readonly arrays: Float32Array[];
  readonly lastGood: Float32Array[];
  readonly reluLayers: number[];
  readonly changed: number[];
  readonly ctx: ForwardContext;
  readonly backend: TrainBackend;
  readonly gather: BatchGatherer;
  readonly totalSteps: number;
  step: number;
}

/** What the steps change, the snapshots that undo them, and where the steps run. */
function prepareSteps(basis: RunBasis, path: TrainPath): StepRun {
  const { opts, work, spec, outputs, classifier, replay, train, rng } = basis;
  const slots = slotsOf(work, opts);
  if (slots.length > 0 && slots.every((sl) => sl.frozen)) {
    // Refused rather than run: epochs that change nothing would look like a finished training.
    const layers = [...new Set(slots.map((sl) => sl.layer))].join(', ');
    throw new TuneConfigError(opts.freezeTensors.size > 0 ? 'freezeTensors' : 'freeze', `every layer with weights (${layers}) is frozen: nothing would train`);
  }
  const anchorStart = anchorStarts(slots, opts.anchor);
  const optimiser = makeOptimiser(opts.optimiser, opts.decay);
  const gradientsChange = anchorStart !== null || opts.clip !== null;
  const arrays = mutableArrays(work);
  const lastGood = snapshot(arrays);
  const reluLayers = hiddenReluLayers(work);
  const changed = changedLayers(work, slots, opts.freeze);

  const ctx = trainingContext(rng.dropout);
  const backend = makeBackend(path, work, spec.input === 'logits');
  const gather = new BatchGatherer(
    work.inputs,
    outputs,
    opts.batch,
    classifier,
    replay && opts.replay ? { rows: replay, perBatch: opts.replay.perBatch, rng: rng.replay } : null,
  );
  const totalSteps = Math.ceil(train.rows / opts.batch) * opts.epochs;
  return { ...basis, slots, anchorStart, optimiser, gradientsChange, arrays, lastGood, reluLayers, changed, ctx, backend, gather, totalSteps, step: 0 };
}

/** The epochs with their reports and early stopping; frees the backend at the end. */
async function runEpochs(run: StepRun): Promise<{ history: EpochRecord[]; bestEpoch: number; stoppedEarly: boolean; aborted: boolean }> {
  const { opts, backend, work, train, held, spec, outputs, classifier, scaling, log, hooks, arrays } = run;
  const history: EpochRecord[] = [];
  let best: Float32Array[] | null = null;
  let bestLoss = Infinity;
  let bestEpoch = -1;
  let stoppedEarly = false;
  let aborted = false;

  try {
    for (let epoch = 0; epoch < opts.epochs && !aborted; epoch++) {
      const started = performance.now();
      const batches = epochBatches(train.rows, opts.batch, run.rng.shuffle);
      const sums = await runBatches(run, epoch, batches);
      if (sums.aborted) {
        aborted = true;
        break;
      }

      // The epoch's report: both splits in inference mode, gradient norms, diagnostics.
      const seconds = (performance.now() - started) / 1000;
      const trainEval = evaluateSplit(backend, work, train, spec, outputs, classifier, run.reluLayers, scaling);
      const heldEval = held ? evaluateSplit(backend, work, held, spec, outputs, classifier, [], scaling) : null;
      const found = epochFindings(work, sums.normSums, batches.length, trainEval.relu, epoch);
      log.addNew(found.diagnostics);
      const record: EpochRecord = {
        epoch,
        batchLoss: sums.lossSum / sums.rowsSeen,
        anchorPenalty: sums.anchorSum / batches.length,
        train: trainEval.metrics,
        holdout: heldEval ? heldEval.metrics : null,
        gradientNorms: found.gradientNorms,
        deadRelu: found.deadRelu,
        lr: sums.lr,
        updates: batches.length,
        rowsPerSecond: sums.rowsSeen / Math.max(seconds, 1e-9),
        diagnostics: found.diagnostics,
      };
      history.push(record);
      hooks.onEpoch?.(record);

      // Early stopping: keep the best hold-out epoch's weights; stop after `stopAfter` without.
      if (heldEval) {
        if (heldEval.metrics.loss < bestLoss * (1 - IMPROVEMENT)) {
          bestLoss = heldEval.metrics.loss;
          bestEpoch = epoch;
          if (opts.stopAfter !== null) best = snapshot(arrays, best ?? undefined);
        } else if (opts.stopAfter !== null && epoch - bestEpoch >= opts.stopAfter) {
          stoppedEarly = true;
          break;
        }
      } else {
        bestEpoch = epoch;
      }
    }
    if (opts.stopAfter !== null && best && !aborted) {
      restore(arrays, best);
    } else {
      bestEpoch = history.length - 1;
    }
  } finally {
    backend.dispose();
  }
  return { history, bestEpoch, stoppedEarly, aborted };
}

/** One epoch's sums over its batches, and whether a signal stopped it. */
interface EpochSums {
  readonly normSums: Map<number, number>;
  readonly lossSum: number;
  readonly anchorSum: number;
  readonly rowsSeen: number;
  readonly lr: number;
  readonly aborted: boolean;
}

/** The steps of one epoch: per batch forward, loss, backward, divergence checks and the optimiser step. */
async function runBatches(run: StepRun, epoch: number, batches: Int32Array[]): Promise<EpochSums> {
  const { opts, spec, work, train, outputs, slots, arrays, lastGood, backend, hooks, withScaling } = run;
  const normSums = new Map<number, number>();
  let lossSum = 0;
  let anchorSum = 0;
  let rowsSeen = 0;
  let lr = opts.lr;
  let aborted = false;
  for (let b = 0; b < batches.length; b++) {
    // Forward, loss and backward on the batch (with its replay rows).
    const batch = run.gather.next(train, batches[b]);
    const n = batch.rows;
    const f = backend.forwardTrain(batch.x, n, run.ctx);
    const loss = computeLoss(spec, Float64Array.from(f.out), n, outputs, batch.targets);
    const grads = backend.backward(f, loss.grad);

    // Per-layer gradient norms of the data loss (before anchor and clipping); one pass
    // serves the norms and the divergence check, which names the first layer gone bad.
    const layerSq = layerSquaredNorms(slots, grads);
    const bad = firstNonFiniteLayer(layerSq, grads);
    if (!Number.isFinite(loss.value) || bad >= 0) {
      restore(arrays, lastGood);
      throw new TuneDivergence(epoch + 1, b + 1, bad >= 0 ? layerLabel(work, bad) : 'the loss', `loss is ${loss.value}`, withScaling(cloneDoc(work)));
    }
    for (const [l, sq] of layerSq) normSums.set(l, (normSums.get(l) ?? 0) + Math.sqrt(sq));

    // Anchor, clipping, then the optimiser step at the scheduled rate.
    const { grads: flat, anchorPenalty } = stepGradients(slots, grads, run.gradientsChange, run.anchorStart, opts.anchor);
    if (opts.clip !== null) clipGlobalNorm(flat, opts.clip);
    lr = rateAt(opts.schedule, opts.lr, { epoch, step: run.step, totalSteps: run.totalSteps });
    snapshot(arrays, lastGood);
    run.optimiser.step(slots, flat, lr);
    run.step++;
    updateRunningStatistics(work, f.stats, n, opts.freeze);

    const brokenAt = firstBrokenSlot(slots);
    if (brokenAt) {
      restore(arrays, lastGood);
      throw new TuneDivergence(
        epoch + 1,
        b + 1,
        layerLabel(work, brokenAt.layer),
        `the update made ${brokenAt.ref.name} non-finite (learning rate ${lr})`,
        withScaling(cloneDoc(work)),
      );
    }
    backend.refresh(run.changed);

    lossSum += loss.value * n;
    anchorSum += anchorPenalty;
    rowsSeen += n;
    hooks.onBatch?.({ epoch, batch: b, batches: batches.length, loss: loss.value + anchorPenalty, rows: n });
    if (hooks.signal) {
      // Let a signal handler (Ctrl-C) run between batches.
      await new Promise<void>((resolve) => setImmediate(resolve));
      if (hooks.signal.aborted) {
        aborted = true;
        break;
      }
    }
  }
  return { normSums, lossSum, anchorSum, rowsSeen, lr, aborted };
}

/** Calibration: one temperature fitted on the hold-out rows' logits (calibration.ts). */
function calibrateOnHoldout(run: StepRun, aborted: boolean): TemperatureFit | null {
  const { opts, held, work, outputs } = run;
  let calibration: TemperatureFit | null = null;
  if (opts.calibrate && held && held.y instanceof Int32Array && !aborted) {
    const { logits, classes } = classLogits(referenceLogits(work, held.x, held.rows), held.rows, outputs);
    calibration = fitTemperature(logits, held.rows, classes, held.y);
    // A fit at an end of the range has no minimum inside it (e.g. every hold-out row right, so
    // the likelihood keeps rising as T falls): storing it would be a confident wrong answer.
    if (!calibration.atBound) work.temperature = calibration.temperature;
  }
  return calibration;
}

/**
 * Loss and per-layer gradients of `doc` on rows x, y on the float64 reference path, in
 * training mode (dropout masks drawn from `seed`), for checks against finite differences.
 * Reads the document's normalisation as it is (unfitted blocks pass inputs through).
 *
 * @example const { loss, grads } = gradientsOf(doc, x, Int32Array.of(0, 2), { rows: 2 });
 */
export function gradientsOf(
  doc: ModelDoc,
  x: Float32Array | Float64Array,
  y: Int32Array | Float32Array | Float64Array,
  options: { rows: number; loss?: string; seed?: number },
): { loss: number; grads: Float64Array[][] } {
  validateModel(doc, doc.meta.name || '(model)');
  const outputs = modelWidths(doc).at(-1)!;
  const resolved = resolveTuneOptions({ loss: options.loss }, doc);
  const spec = lossFor(outputActivation(doc), resolved.loss ?? undefined);
  const backend = makeBackend('reference', doc, spec.input === 'logits');
  const f = backend.forwardTrain(x, options.rows, trainingContext(new SeededRng(options.seed ?? 0)));
  const loss = computeLoss(spec, Float64Array.from(f.out), options.rows, outputs, targetsOf(y, 0, options.rows, outputs));
  const grads = backend.backward(f, loss.grad).map((l) => l.map((g) => Float64Array.from(g)));
  return { loss: loss.value, grads };
}
