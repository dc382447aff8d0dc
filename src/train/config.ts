/**
 * Training options: what a caller may pass, their defaults, and the checks that refuse bad
 * hyperparameters before any epoch runs (TuneConfigError names the option).
 */
import { TuneConfigError } from '../errors.js';
import { canCalibrate, outputDenseIndex } from '../model/temperature.js';
import type { DenseLayer, ModelDoc } from '../model/types.js';
import { LOSS_NAMES, type LossName } from './losses.js';
import type { NormalisationPolicy } from './normalisation.js';
import { ADAM_DEFAULTS, OPTIMISER_NAMES, type OptimiserSpec, type WeightDecay } from './optimisers.js';
import type { Schedule } from './schedule.js';

/** Rows for training: x is rows x doc.inputs raw features; y holds class indices or target values. */
export interface TuneData {
  readonly x: Float32Array | Float64Array;
  readonly rows: number;
  /** Class indices (one per row) for classifiers, or rows x outputs values for regression. */
  readonly y: Int32Array | Float32Array | Float64Array;
}

export interface TuneOptions {
  /** Passes over the training rows. Default 10. */
  epochs?: number;
  /** Rows per update; 1 = stochastic, >= rows = full batch. Default 32. */
  batch?: number;
  /** Base learning rate. Default 0.001 for adam, 0.01 otherwise. */
  lr?: number;
  /** Default 'adam'. */
  optimizer?: string;
  /** Momentum coefficient for 'momentum', in [0, 1). Default 0.9. */
  momentum?: number;
  /** Nesterov's look-ahead form of momentum. Default false. */
  nesterov?: boolean;
  beta1?: number;
  beta2?: number;
  epsilon?: number;
  /** Weight-decay rate (on dense weights only). Default 0. */
  weightDecay?: number;
  /** 'decoupled' (default) or 'l2'. */
  decayMode?: string;
  /** Learning-rate shape: 'constant' (default), 'step', 'cosine'. */
  schedule?: string;
  /** For 'step': epochs between drops (default 10) and the factor (default 0.5). */
  stepEvery?: number;
  stepFactor?: number;
  /** For 'cosine': the rate at the end of the run (default 0). */
  floor?: number;
  /** Updates of linear warm-up. Default 0. */
  warmup?: number;
  /** Clip the global gradient norm to this value; unset for no clipping. */
  clip?: number;
  /** Seed of every random choice in the run (init of unset weights, shuffles, masks, split). Default 0. */
  seed?: number;
  /** Fraction of the rows held out, in (0, 1). Ignored when `holdoutData` is given. */
  holdout?: number;
  /** Separate hold-out rows. */
  holdoutData?: TuneData;
  /** Epochs without a better hold-out loss before stopping; unset to run every epoch. */
  stopAfter?: number;
  /** Layer indices whose tensors get no updates (a frozen batch norm keeps its running stats). */
  freeze?: number[];
  /** Individual tensors to leave unchanged, by name, e.g. "layers[0].bias". */
  freezeTensors?: string[];
  /** Strength of the pull towards the starting weights: strength * ||w - w_start||^2. Default 0. */
  anchor?: number;
  /** Rows from an earlier data set mixed into every batch. */
  replay?: TuneData;
  /** Replay rows per batch: a count >= 1 or a fraction of the batch in (0, 1). Default 0.25. */
  replayPerBatch?: number;
  /** Override the loss chosen from the output activation. */
  loss?: string;
  /** On a fitted normalise block: 'keep' (default) or 'continue' over the new rows. */
  normalisation?: string;
  /**
   * After training, fit a calibration temperature on the hold-out rows (needs hold-out rows and
   * a softmax or single-sigmoid output). Without it, a temperature the model had is dropped:
   * it was fitted to the old weights.
   */
  calibrate?: boolean;
  /**
   * Regression with a linear output: fit each target's mean and standard deviation from the
   * training rows, train on (y - mean) / std and store them in the model, which answers in
   * target units. Default true. A model that already stores a target scaling keeps it either way.
   */
  scaleTargets?: boolean;
}

export interface ResolvedTuneOptions {
  readonly epochs: number;
  readonly batch: number;
  readonly lr: number;
  readonly optimiser: OptimiserSpec;
  readonly decay: WeightDecay | null;
  readonly schedule: Schedule;
  readonly clip: number | null;
  readonly seed: number;
  readonly holdout: { readonly kind: 'none' } | { readonly kind: 'fraction'; readonly fraction: number } | { readonly kind: 'data'; readonly data: TuneData };
  readonly stopAfter: number | null;
  readonly freeze: ReadonlySet<number>;
  readonly freezeTensors: ReadonlySet<string>;
  readonly anchor: number;
  readonly replay: { readonly data: TuneData; readonly perBatch: number } | null;
  readonly loss: LossName | null;
  readonly normalisation: NormalisationPolicy;
  readonly calibrate: boolean;
  readonly scaleTargets: boolean;
}

const isFiniteNumber = (v: unknown): v is number => typeof v === 'number' && Number.isFinite(v);

function positiveInt(name: string, v: number | undefined, fallback: number): number {
  if (v === undefined) return fallback;
  if (!Number.isInteger(v) || v < 1) throw new TuneConfigError(name, `must be a whole number >= 1, got ${v}`);
  return v;
}

function inRange(name: string, v: number | undefined, fallback: number, lo: number, hi: number, loOpen: boolean, hiOpen: boolean): number {
  if (v === undefined) return fallback;
  const ok = isFiniteNumber(v) && (loOpen ? v > lo : v >= lo) && (hiOpen ? v < hi : v <= hi);
  if (!ok) throw new TuneConfigError(name, `must be in ${loOpen ? '(' : '['}${lo}, ${hi}${hiOpen ? ')' : ']'}, got ${v}`);
  return v;
}

function oneOf<T extends string>(name: string, v: string | undefined, allowed: readonly T[], fallback: T): T {
  if (v === undefined) return fallback;
  if (!(allowed as readonly string[]).includes(v)) throw new TuneConfigError(name, `must be one of ${allowed.join(', ')}, got "${v}"`);
  return v as T;
}

function flag(name: string, v: boolean | undefined, fallback: boolean): boolean {
  if (v === undefined) return fallback;
  if (typeof v !== 'boolean') throw new TuneConfigError(name, `must be true or false, got ${String(v)}`);
  return v;
}

function checkData(name: string, data: TuneData, inputs: number): void {
  if (!Number.isInteger(data.rows) || data.rows < 1) throw new TuneConfigError(name, `needs at least one row, got ${data.rows}`);
  if (data.x.length !== data.rows * inputs) {
    throw new TuneConfigError(name, `x has ${data.x.length} values, expected rows x inputs = ${data.rows} x ${inputs}`);
  }
}

/**
 * Fill defaults and refuse bad hyperparameters for training `doc`.
 *
 * @example resolveTuneOptions({ lr: 0.01, optimizer: 'sgd' }, doc).optimiser // { name: 'sgd' }
 * @throws TuneConfigError naming the option, e.g. "tune option lr: must be in (0, Infinity), got -1"
 */
export function resolveTuneOptions(opts: TuneOptions, doc: ModelDoc): ResolvedTuneOptions {
  const optimiserName = oneOf('optimizer', opts.optimizer, OPTIMISER_NAMES, 'adam');
  const lr = opts.lr === undefined ? (optimiserName === 'adam' ? 0.001 : 0.01) : opts.lr;
  if (!isFiniteNumber(lr) || lr <= 0) throw new TuneConfigError('lr', `must be a finite number > 0, got ${lr}`);

  const optimiser = resolveOptimiser(optimiserName, opts);

  const decayRate = inRange('weightDecay', opts.weightDecay, 0, 0, Infinity, false, true);
  const decayMode = oneOf('decayMode', opts.decayMode, ['decoupled', 'l2'] as const, 'decoupled');
  const decay = decayRate > 0 ? { mode: decayMode, rate: decayRate } : null;

  const schedule = resolveSchedule(opts, lr);

  const clip = opts.clip === undefined ? null : inRange('clip', opts.clip, 0, 0, Infinity, true, true);

  const seed = opts.seed ?? 0;
  if (!Number.isInteger(seed)) throw new TuneConfigError('seed', `must be a whole number, got ${seed}`);

  const holdout = resolveHoldout(opts, doc);

  const stopAfter = opts.stopAfter === undefined ? null : positiveInt('stopAfter', opts.stopAfter, 1);
  if (stopAfter !== null && holdout.kind === 'none') throw new TuneConfigError('stopAfter', 'early stopping needs hold-out rows (holdout or holdoutData)');

  const calibrate = opts.calibrate === true;
  if (calibrate && holdout.kind === 'none') throw new TuneConfigError('calibrate', 'fitting a temperature needs hold-out rows (holdout or holdoutData)');
  if (calibrate && !canCalibrate(doc))
    throw new TuneConfigError('calibrate', "a temperature applies to a softmax or sigmoid output layer; this model's output is neither");
  if (calibrate && (doc.layers[outputDenseIndex(doc)] as DenseLayer).activation === 'sigmoid' && (doc.layers[outputDenseIndex(doc)] as DenseLayer).size !== 1) {
    throw new TuneConfigError(
      'calibrate',
      'a temperature is fitted to classes: a softmax output, or one sigmoid unit (this model has several sigmoid outputs)',
    );
  }

  const { freeze, freezeTensors } = resolveFreeze(opts, doc);

  const anchor = inRange('anchor', opts.anchor, 0, 0, Infinity, false, true);

  const replay = resolveReplay(opts, doc);

  return {
    epochs: positiveInt('epochs', opts.epochs, 10),
    batch: positiveInt('batch', opts.batch, 32),
    lr,
    optimiser,
    decay,
    schedule,
    clip,
    seed,
    holdout,
    stopAfter,
    freeze,
    freezeTensors,
    anchor,
    replay,
    loss: opts.loss === undefined ? null : oneOf('loss', opts.loss, LOSS_NAMES, 'mse'),
    normalisation: oneOf('normalisation', opts.normalisation, ['keep', 'continue'] as const, 'keep'),
    calibrate,
    scaleTargets: flag('scaleTargets', opts.scaleTargets, true),
  };
}

/** The optimiser's own settings, with their defaults. */
function resolveOptimiser(optimiserName: OptimiserSpec['name'], opts: TuneOptions): OptimiserSpec {
  if (optimiserName === 'sgd') return { name: 'sgd' };
  if (optimiserName === 'momentum') {
    return { name: 'momentum', momentum: inRange('momentum', opts.momentum, 0.9, 0, 1, false, true), nesterov: opts.nesterov ?? false };
  }
  return {
    name: 'adam',
    beta1: inRange('beta1', opts.beta1, ADAM_DEFAULTS.beta1, 0, 1, false, true),
    beta2: inRange('beta2', opts.beta2, ADAM_DEFAULTS.beta2, 0, 1, false, true),
    epsilon: inRange('epsilon', opts.epsilon, ADAM_DEFAULTS.epsilon, 0, Infinity, true, true),
  };
}

/** The learning-rate schedule: its shape and the warm-up steps. */
function resolveSchedule(opts: TuneOptions, lr: number): Schedule {
  const shape = oneOf('schedule', opts.schedule, ['constant', 'step', 'cosine'] as const, 'constant');
  const warmupSteps = opts.warmup === undefined ? 0 : opts.warmup;
  if (!Number.isInteger(warmupSteps) || warmupSteps < 0) throw new TuneConfigError('warmup', `must be a whole number >= 0, got ${warmupSteps}`);
  return shape === 'step'
    ? {
        shape: {
          kind: 'step',
          everyEpochs: positiveInt('stepEvery', opts.stepEvery, 10),
          factor: inRange('stepFactor', opts.stepFactor, 0.5, 0, 1, true, false),
        },
        warmupSteps,
      }
    : shape === 'cosine'
      ? { shape: { kind: 'cosine', floor: inRange('floor', opts.floor, 0, 0, lr, false, false) }, warmupSteps }
      : { shape: { kind: 'constant' }, warmupSteps };
}

/** Hold-out rows: given, a fraction of the training rows, or none. */
function resolveHoldout(opts: TuneOptions, doc: ModelDoc): ResolvedTuneOptions['holdout'] {
  if (opts.holdoutData) {
    checkData('holdoutData', opts.holdoutData, doc.inputs);
    return { kind: 'data', data: opts.holdoutData };
  }
  if (opts.holdout !== undefined) return { kind: 'fraction', fraction: inRange('holdout', opts.holdout, 0, 0, 1, true, true) };
  return { kind: 'none' };
}

/** Frozen layers (by index) and frozen tensors (by name); refuses freezing every layer. */
function resolveFreeze(opts: TuneOptions, doc: ModelDoc): { freeze: Set<number>; freezeTensors: Set<string> } {
  const freeze = new Set<number>();
  for (const i of opts.freeze ?? []) {
    if (!Number.isInteger(i) || i < 0 || i >= doc.layers.length) {
      throw new TuneConfigError('freeze', `layer index ${i} is out of range 0..${doc.layers.length - 1}`);
    }
    freeze.add(i);
  }
  const freezeTensors = new Set<string>();
  for (const name of opts.freezeTensors ?? []) {
    const m = /^layers\[(\d+)\]\.(\w+)$/.exec(name);
    if (!m || Number(m[1]) >= doc.layers.length) throw new TuneConfigError('freezeTensors', `"${name}" does not name a tensor like layers[0].bias`);
    freezeTensors.add(name);
  }
  if (freeze.size === doc.layers.length && doc.layers.length > 0) throw new TuneConfigError('freeze', 'every layer is frozen: nothing would train');
  return { freeze, freezeTensors };
}

/** Replay rows mixed into each batch, and how many per batch (a fraction or a count). */
function resolveReplay(opts: TuneOptions, doc: ModelDoc): ResolvedTuneOptions['replay'] {
  if (!opts.replay) return null;
  checkData('replay', opts.replay, doc.inputs);
  const perBatch = opts.replayPerBatch ?? 0.25;
  if (!isFiniteNumber(perBatch) || perBatch <= 0 || (perBatch >= 1 && !Number.isInteger(perBatch))) {
    throw new TuneConfigError('replayPerBatch', `must be a fraction in (0, 1) or a whole count >= 1, got ${perBatch}`);
  }
  return { data: opts.replay, perBatch };
}
