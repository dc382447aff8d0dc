/**
 * Everything settled once before the first batch: the seeded random streams, where the steps
 * run, starting values for layers stored without them, the loss's output activation, the
 * normalisation block, the dropout masks of training mode, and the parent for provenance.
 */
import { TuneConfigError } from '../errors.js';
import { encodeModel, checksumOf } from '../format/index.js';
import {
  SeededRng,
  attachTargetScaling,
  fitTargetScaling,
  layerKind,
  layerOutputWidth,
  scalableOutputLayer,
  type ActivationName,
  type ForwardContext,
  type ModelDoc,
  type TargetScaling,
} from '../model/index.js';
import { wasmSimdAvailable } from '../engine/fast/dense-kernel.js';
import { simdTrainBlocker } from '../engine/fast/simd-trainer.js';
import { TRAIN_PATHS, type TrainPath } from './backends.js';
import type { TuneData } from './config.js';
import { rawInputs, type Diagnostic } from './diagnostics.js';
import { isUnfitted, updateNormalisation, type NormalisationPolicy } from './normalisation.js';

/** Refuse a path name that is not one of TRAIN_PATHS (the option may come from untyped input). */
export function checkPath(asked: TrainPath | undefined): void {
  if (asked !== undefined && !(TRAIN_PATHS as readonly string[]).includes(asked)) {
    throw new TuneConfigError('path', `must be one of ${TRAIN_PATHS.join(', ')}, got "${String(asked)}"`);
  }
}

/** Streams for each random choice, so adding draws to one never shifts another. */
export function streams(seed: number) {
  const derive = (k: number) => new SeededRng((seed ^ Math.imul(k, 0x9e3779b9)) | 0);
  return { init: derive(1), split: derive(2), shuffle: derive(3), dropout: derive(4), replay: derive(5) };
}

/**
 * The path a run takes: what was asked for, or the fastest one that can train `doc`. An explicit
 * 'fast' that cannot run here becomes 'engine' with a diagnostic saying why; never an error.
 */
export function choosePath(asked: TrainPath | undefined, doc: ModelDoc): { path: TrainPath; fallback: Diagnostic | null } {
  if (asked === 'engine' || asked === 'reference') return { path: asked, fallback: null };
  const simd = wasmSimdAvailable();
  const blocker = simd ? simdTrainBlocker(doc) : 'this runtime lacks WebAssembly SIMD';
  if (blocker === null) return { path: 'fast', fallback: null };
  if (asked === undefined) return { path: 'engine', fallback: null };
  return {
    path: 'engine',
    fallback: {
      code: 'engine_fallback',
      message: `the fast training path cannot run (${blocker}); training on the tfjs engine instead`,
      hint: simd
        ? 'results agree within float32 tolerance; a model of dense and dropout layers only trains on the fast path'
        : 'results agree within float32 tolerance; a Node.js build with WebAssembly SIMD trains on the fast path',
    },
  };
}

/**
 * Give layers stored without values (a spec) their starting values: dense weights by
 * He / Glorot from the seeded generator with zero biases; batch norm as the identity.
 */
export function initialiseEmpty(doc: ModelDoc, rng: SeededRng): void {
  let width = doc.inputs;
  doc.layers.forEach((layer, i) => {
    const filled = layerKind(layer.kind).fillEmpty(layer, width, rng);
    if (filled) doc.layers[i] = filled;
    width = layerOutputWidth(doc.layers[i], width);
  });
}

/**
 * The activation the loss sees: the last dense layer's when only dropout follows it, else linear.
 * Any other layer after it (a batch norm, or a kind added later) changes the output, so the loss
 * must not fuse with that dense layer's activation (softmax with cross-entropy, say).
 */
export function outputActivation(doc: ModelDoc): ActivationName {
  for (let i = doc.layers.length - 1; i >= 0; i--) {
    const l = doc.layers[i];
    if (l.kind === 'dense') return l.activation;
    if (l.kind !== 'dropout') return 'linear';
  }
  return 'linear';
}

/**
 * Fit an unfitted normalise block from the training rows, or keep or continue a fitted one per
 * `policy`. Without a block: a diagnostic when the raw inputs look unscaled, else null.
 */
export function prepareNormalisation(doc: ModelDoc, train: TuneData, policy: NormalisationPolicy): Diagnostic | null {
  if (doc.normalise) {
    doc.normalise = updateNormalisation(doc.normalise, train.x, train.rows, doc.inputs, isUnfitted(doc.normalise) ? 'continue' : policy);
    return null;
  }
  return rawInputs(train.x, train.rows, doc.inputs, false);
}

/** True when the layer that gives the answers is stored without weights (a spec): a tune initialises it. */
export function outputLayerEmpty(doc: ModelDoc): boolean {
  const at = scalableOutputLayer(doc);
  const layer = at >= 0 ? doc.layers[at] : null;
  return layer?.kind === 'dense' && layer.weight.length === 0;
}

/**
 * The target scaling a run trains with, or null: the one the model stores; else, for regression
 * onto a linear output with `scale` on, one fitted from the training targets. Added to a model
 * whose output layer already holds trained weights, it is attached with the inverse fold, so
 * the model's answers are unchanged before the first step; a freshly initialised output layer
 * starts in the scaled units directly. Sets `doc.targetScaling` accordingly.
 */
export function prepareTargetScaling(doc: ModelDoc, train: TuneData, outputs: number, scale: boolean, freshOutput: boolean): TargetScaling | null {
  if (doc.targetScaling) return doc.targetScaling;
  if (!scale || train.y instanceof Int32Array || scalableOutputLayer(doc) < 0) return null;
  const fitted = fitTargetScaling(train.y, train.rows, outputs);
  if (freshOutput) doc.targetScaling = fitted;
  else attachTargetScaling(doc, fitted);
  return fitted;
}

/** `data` with its targets as the model learns them, (y - mean) / std, in a new array; class targets pass as they are. */
export function scaledTargets(data: TuneData, scaling: TargetScaling | null): TuneData {
  if (!scaling || data.y instanceof Int32Array) return data;
  const outputs = scaling.mean.length;
  const y = new Float32Array(data.y.length);
  for (let i = 0; i < y.length; i++) y[i] = (data.y[i] - scaling.mean[i % outputs]) / scaling.std[i % outputs];
  return { ...data, y };
}

/** Training mode whose dropout keep-masks (0 or 1/(1-rate)) draw from `rng`. */
export function trainingContext(rng: SeededRng): ForwardContext {
  return {
    training: true,
    dropoutMask(_layer, rows, cols, rate) {
      const mask = new Float32Array(rows * cols);
      const keep = 1 / (1 - rate);
      for (let i = 0; i < mask.length; i++) mask[i] = rng.next() < rate ? 0 : keep;
      return mask;
    },
  };
}

/** Default words for where the starting weights came from when neither a parent file nor an origin is given. */
const HELD_IN_MEMORY = 'a model held in memory';

/**
 * The provenance step a tune adds, worded to read "ACTION from SOURCE": fine-tuned from the parent
 * file when there is one, else trained from `origin` (a spec, a model built in memory) with the
 * starting weights' own checksum; null for a spec without weights.
 */
export function tuneProvenance(
  doc: ModelDoc,
  parent: { checksum: string; source: string } | undefined,
  origin: string | undefined,
): { checksum: string; source: string; action: string } | null {
  if (parent) return { checksum: parent.checksum, source: parent.source, action: 'fine-tuned' };
  try {
    return { checksum: checksumOf(encodeModel(doc)), source: origin || HELD_IN_MEMORY, action: 'trained' };
  } catch {
    // A spec without weights cannot be encoded: it has no parent file to name.
    return null;
  }
}
