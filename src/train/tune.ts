/**
 * The tune loop: mini-batch gradient descent on a copy of a model document.
 *
 * Per epoch: a fresh seeded shuffle cut into ceil(n / k) batches; per batch: training forward
 * (seeded dropout masks, batch statistics in batch normalisation), loss, backward, anchor
 * penalty, clipping, optimiser step (weight decay inside it), running-statistics update,
 * kernel refresh. After each epoch: evaluation of the training and hold-out rows in inference
 * mode, diagnostics, early stopping. Everything random draws from generators seeded by
 * `seed`, so a run repeats bit for bit.
 */
import { DataError, DivergenceError, TuneConfigError } from '../errors.js';
import { encodeModel, checksumOf } from '../format/index.js';
import {
  SeededRng,
  initDense,
  layerKind,
  modelWidths,
  validateModel,
  type ActivationName,
  type ForwardContext,
  type Layer,
  type ModelDoc,
  type ParamRef,
} from '../model/index.js';
import { wasmSimdAvailable } from '../engine/fast/dense-kernel.js';
import { fastTrainBlocker } from '../engine/fast/fast-train.js';
import { TRAIN_PATHS, makeBackend, type TrainBackend, type TrainPath } from './backends.js';
import { clipGlobalNorm } from './clip.js';
import { resolveTuneOptions, type ResolvedTuneOptions, type TuneData, type TuneOptions } from './config.js';
import { ReluActivity, linearStacks, rawInputs, vanishingGradient, type Diagnostic, type LayerNorm } from './diagnostics.js';
import { computeLoss, lossFor, type LossSpec, type Targets } from './losses.js';
import { accuracy, confusionMatrix, meanAbsoluteError, predictedClasses, rootMeanSquaredError } from './metrics.js';
import { copyNormalisation, isUnfitted, updateNormalisation } from './normalisation.js';
import { makeOptimiser, type ParamSlot } from './optimisers.js';
import { rateAt } from './schedule.js';
import { epochBatches, shuffledOrder, splitHoldout } from './shuffle.js';

export interface SplitMetrics {
  readonly loss: number;
  /** Classifiers only. */
  readonly accuracy: number | null;
  /** Classifiers only: row = true class, column = predicted. */
  readonly confusion: number[][] | null;
  /** Regression only. */
  readonly mae: number | null;
  readonly rmse: number | null;
}

export interface EpochRecord {
  /** 0-based. */
  readonly epoch: number;
  /** Mean loss of the epoch's batches as trained (dropout on, before each step). */
  readonly batchLoss: number;
  /** Mean anchor penalty over the epoch's batches (0 without anchor). */
  readonly anchorPenalty: number;
  /** The training rows evaluated in inference mode after the epoch. */
  readonly train: SplitMetrics;
  readonly holdout: SplitMetrics | null;
  /** Per layer with parameters: mean over batches of the L2 norm of its gradients. */
  readonly gradientNorms: Record<number, number>;
  /** Per ReLU layer: share of units that never fired on the epoch's rows. */
  readonly deadRelu: Record<number, number>;
  /** Learning rate of the epoch's last update. */
  readonly lr: number;
  readonly updates: number;
  readonly rowsPerSecond: number;
  readonly diagnostics: Diagnostic[];
}

export interface BatchProgress {
  readonly epoch: number;
  /** 0-based batch within the epoch. */
  readonly batch: number;
  readonly batches: number;
  readonly loss: number;
  readonly rows: number;
}

export interface TuneHooks {
  onBatch?(p: BatchProgress): void;
  onEpoch?(r: EpochRecord): void;
  /** Stops the run after the current batch; the result says `aborted`. */
  signal?: AbortSignal;
}

export interface TuneRunOptions extends TuneOptions {
  /**
   * Where the steps run: 'fast' (own WebAssembly SIMD kernel), 'engine' (tfjs) or 'reference'
   * (float64). Default: 'fast' when the runtime has WebAssembly SIMD and the model has only
   * dense and dropout layers, else 'engine'. An explicit 'fast' that cannot run falls back to
   * 'engine' with an 'engine_fallback' diagnostic.
   */
  path?: TrainPath;
  /** The parent file, for provenance; computed from the document when not given. */
  parent?: { checksum: string; source: string };
}

export interface TuneResult {
  /** A new document; the input is never changed. */
  readonly doc: ModelDoc;
  readonly history: EpochRecord[];
  /** Run-level diagnostics, then each per-epoch diagnostic the first time it appears. */
  readonly diagnostics: Diagnostic[];
  readonly stoppedEarly: boolean;
  /** Epoch whose weights the document holds (best hold-out loss under early stopping, else the last). */
  readonly bestEpoch: number;
  /** The signal stopped the run; `doc` holds the weights after the last complete batch. */
  readonly aborted: boolean;
  readonly loss: LossSpec;
  /** Where the steps actually ran (after any fallback). */
  readonly path: TrainPath;
}

/**
 * Divergence with the document as it was before the step that went bad, so a caller can keep it.
 * Still a DivergenceError (exit code 1, the same message).
 */
export class TuneDivergence extends DivergenceError {
  constructor(
    epoch: number,
    batch: number,
    layer: string,
    detail: string,
    /** A copy of the last weights whose loss and gradients were finite. */
    readonly lastGood: ModelDoc,
  ) {
    super(epoch, batch, layer, detail);
  }
}

/**
 * The path a run takes: what was asked for, or the fastest one that can train `doc`. An explicit
 * 'fast' that cannot run here becomes 'engine' with a diagnostic saying why; never an error.
 */
function choosePath(asked: TrainPath | undefined, doc: ModelDoc): { path: TrainPath; fallback: Diagnostic | null } {
  if (asked === 'engine' || asked === 'reference') return { path: asked, fallback: null };
  const simd = wasmSimdAvailable();
  const blocker = simd ? fastTrainBlocker(doc) : 'this runtime lacks WebAssembly SIMD';
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

/** Hold-out loss must improve by more than this (relative) to count as better. */
const IMPROVEMENT = 1e-9;
/** Rows per piece when evaluating, so memory stays bounded on large data. */
const EVAL_ROWS = 4096;

/** Streams for each random choice, so adding draws to one never shifts another. */
function streams(seed: number) {
  const derive = (k: number) => new SeededRng((seed ^ Math.imul(k, 0x9e3779b9)) | 0);
  return { init: derive(1), split: derive(2), shuffle: derive(3), dropout: derive(4), replay: derive(5) };
}

function cloneLayer(layer: Layer): Layer {
  switch (layer.kind) {
    case 'dense':
      return { ...layer, weight: layer.weight.slice(), bias: layer.bias.slice() };
    case 'batchnorm':
      return { ...layer, gamma: layer.gamma.slice(), beta: layer.beta.slice(), runningMean: layer.runningMean.slice(), runningVariance: layer.runningVariance.slice() };
    case 'dropout':
      return { ...layer };
  }
}

/** A deep copy: the result shares no array with `doc`. */
export function cloneDoc(doc: ModelDoc): ModelDoc {
  return {
    ...doc,
    features: doc.features && [...doc.features],
    labels: doc.labels && [...doc.labels],
    normalise: doc.normalise && copyNormalisation(doc.normalise),
    layers: doc.layers.map(cloneLayer),
    meta: { ...doc.meta, extra: { ...doc.meta.extra } },
    provenance: doc.provenance.map((p) => ({ ...p })),
  };
}

/**
 * Give layers stored without values (a spec) their starting values: dense weights by
 * He / Glorot from the seeded generator with zero biases; batch norm as the identity.
 */
function initialiseEmpty(doc: ModelDoc, rng: SeededRng): void {
  let width = doc.inputs;
  doc.layers.forEach((layer, i) => {
    if (layer.kind === 'dense' && layer.weight.length === 0) {
      const fresh = initDense(width, layer.units, layer.activation, rng, layer.alpha);
      doc.layers[i] = { ...fresh, alpha: layer.alpha };
    } else if (layer.kind === 'batchnorm' && layer.gamma.length === 0) {
      doc.layers[i] = {
        ...layer,
        gamma: new Float32Array(width).fill(1),
        beta: new Float32Array(width),
        runningMean: new Float32Array(width),
        runningVariance: new Float32Array(width).fill(1),
      };
    }
    width = layerKind(doc.layers[i].kind).outputWidth(doc.layers[i], width);
  });
}

function outputActivation(doc: ModelDoc): ActivationName {
  for (let i = doc.layers.length - 1; i >= 0; i--) {
    const l = doc.layers[i];
    if (l.kind === 'dense') return l.activation;
    if (l.kind === 'batchnorm') return 'linear';
  }
  return 'linear';
}

/** Targets checked against the model's output width; classes when y is an Int32Array. */
function checkTargets(data: TuneData, outputs: number, name: string): void {
  if (data.y instanceof Int32Array) {
    if (data.y.length !== data.rows) throw new TuneConfigError(`${name}.y`, `has ${data.y.length} class indices, expected one per row (${data.rows})`);
    const classes = outputs === 1 ? 2 : outputs;
    for (let r = 0; r < data.rows; r++) {
      const c = data.y[r];
      if (c < 0 || c >= classes) throw new DataError(`(${name})`, r + 1, 0, `class ${c} is not one the model knows (0..${classes - 1})`);
    }
  } else if (data.y.length !== data.rows * outputs) {
    throw new TuneConfigError(`${name}.y`, `has ${data.y.length} values, expected rows x outputs = ${data.rows} x ${outputs}`);
  }
}

function subset(data: TuneData, rows: Int32Array, inputs: number, outputs: number): TuneData {
  const x = new Float32Array(rows.length * inputs);
  const classes = data.y instanceof Int32Array;
  const y = classes ? new Int32Array(rows.length) : new Float32Array(rows.length * outputs);
  rows.forEach((r, i) => {
    x.set(data.x.subarray(r * inputs, (r + 1) * inputs), i * inputs);
    if (classes) y[i] = data.y[r];
    else y.set(data.y.subarray(r * outputs, (r + 1) * outputs), i * outputs);
  });
  return { x, rows: rows.length, y };
}

function asFloat32(data: TuneData): TuneData {
  return data.x instanceof Float32Array ? data : { ...data, x: Float32Array.from(data.x) };
}

function targetsOf(y: TuneData['y'], from: number, to: number, outputs: number): Targets {
  return y instanceof Int32Array
    ? { kind: 'classes', classes: y.subarray(from, to) }
    : { kind: 'values', values: y.subarray(from * outputs, to * outputs) };
}

/** One trainable tensor with where it lives. */
interface Slot extends ParamSlot {
  readonly ref: ParamRef;
  readonly layer: number;
  /** Index among its layer's trainable tensors (the order backward returns gradients in). */
  readonly position: number;
  readonly frozen: boolean;
}

function slotsOf(doc: ModelDoc, opts: ResolvedTuneOptions): Slot[] {
  const widths = modelWidths(doc);
  const slots: Slot[] = [];
  doc.layers.forEach((layer, i) => {
    layerKind(layer.kind)
      .trainable(layer, widths[i], i)
      .forEach((ref, position) => {
        slots.push({
          ref,
          data: ref.data,
          layer: i,
          position,
          // Decay shrinks dense weights only: biases and batch-norm scales set offsets and gains, not capacity.
          decays: layer.kind === 'dense' && ref.name.endsWith('.weight'),
          frozen: opts.freeze.has(i) || opts.freezeTensors.has(ref.name),
        });
      });
  });
  return slots;
}

/** Every float32 array the run changes (trainable tensors and batch-norm running statistics). */
function mutableArrays(doc: ModelDoc): Float32Array[] {
  const out: Float32Array[] = [];
  for (const l of doc.layers) {
    if (l.kind === 'dense') out.push(l.weight, l.bias);
    else if (l.kind === 'batchnorm') out.push(l.gamma, l.beta, l.runningMean, l.runningVariance);
  }
  return out;
}

function snapshot(arrays: Float32Array[], into?: Float32Array[]): Float32Array[] {
  if (!into) return arrays.map((a) => a.slice());
  arrays.forEach((a, i) => into[i].set(a));
  return into;
}

function restore(arrays: Float32Array[], from: Float32Array[]): void {
  arrays.forEach((a, i) => a.set(from[i]));
}

/** Σ v² in float64, in four interleaved partial sums (independent adds run in parallel). */
function sumSquares(a: Float32Array | Float64Array): number {
  let s0 = 0;
  let s1 = 0;
  let s2 = 0;
  let s3 = 0;
  const n = a.length;
  let j = 0;
  for (; j + 4 <= n; j += 4) {
    s0 += a[j] * a[j];
    s1 += a[j + 1] * a[j + 1];
    s2 += a[j + 2] * a[j + 2];
    s3 += a[j + 3] * a[j + 3];
  }
  for (; j < n; j++) s0 += a[j] * a[j];
  return s0 + s1 + s2 + s3;
}

/** True when no value is NaN or infinite: v * 0 is 0 for finite v and NaN otherwise. */
function allFinite(a: ArrayLike<number>): boolean {
  // Four sums so the adds do not wait on one another (this runs over every weight each step).
  let s0 = 0;
  let s1 = 0;
  let s2 = 0;
  let s3 = 0;
  const n = a.length;
  let i = 0;
  for (; i + 4 <= n; i += 4) {
    s0 += a[i] * 0;
    s1 += a[i + 1] * 0;
    s2 += a[i + 2] * 0;
    s3 += a[i + 3] * 0;
  }
  for (; i < n; i++) s0 += a[i] * 0;
  return s0 + s1 + s2 + s3 === 0;
}

function layerLabel(doc: ModelDoc, i: number): string {
  return `layers[${i}] (${doc.layers[i].kind})`;
}

interface Evaluation {
  readonly metrics: SplitMetrics;
  readonly relu: ReluActivity;
}

function evaluate(
  backend: TrainBackend,
  doc: ModelDoc,
  data: TuneData,
  spec: LossSpec,
  outputs: number,
  classifier: boolean,
  reluLayers: readonly number[],
): Evaluation {
  const relu = new ReluActivity();
  let lossSum = 0;
  const outAll = new Float64Array(data.rows * outputs);
  for (let start = 0; start < data.rows; start += EVAL_ROWS) {
    const n = Math.min(EVAL_ROWS, data.rows - start);
    const layers = backend.evaluate(data.x.subarray(start * doc.inputs, (start + n) * doc.inputs), n);
    for (const i of reluLayers) {
      const l = doc.layers[i];
      if (l.kind === 'dense') relu.observe(i, layers[i], n, l.units);
    }
    const out = Float64Array.from(layers[layers.length - 1]);
    outAll.set(out, start * outputs);
    lossSum += computeLoss(spec, out, n, outputs, targetsOf(data.y, start, start + n, outputs)).value * n;
  }
  const loss = lossSum / data.rows;
  if (classifier && data.y instanceof Int32Array) {
    // A single sigmoid output: the evaluation output is a logit when the loss reads logits.
    const predicted = predictedClasses(outAll, data.rows, outputs, spec.input === 'logits' ? 0 : 0.5);
    return {
      metrics: { loss, accuracy: accuracy(predicted, data.y), confusion: confusionMatrix(predicted, data.y, outputs === 1 ? 2 : outputs), mae: null, rmse: null },
      relu,
    };
  }
  const t = data.y instanceof Int32Array ? Float64Array.from(data.y) : data.y;
  return { metrics: { loss, accuracy: null, confusion: null, mae: meanAbsoluteError(outAll, t), rmse: rootMeanSquaredError(outAll, t) }, relu };
}

function parentProvenance(doc: ModelDoc, given: TuneRunOptions['parent']): { checksum: string; source: string } | null {
  if (given) return given;
  try {
    return { checksum: checksumOf(encodeModel(doc)), source: '(memory)' };
  } catch {
    // A spec without weights cannot be encoded: it has no parent file to name.
    return null;
  }
}

/**
 * Train (or fine-tune) `doc` on `data` and return a new document.
 *
 * @example
 * const { doc: tuned, history } = await tune(doc, { x, rows, y: classes }, { epochs: 20, batch: 16, lr: 0.01, seed: 1, holdout: 0.2 });
 * @throws TuneConfigError for bad options, DataError for a class the model does not know,
 *   ModelFileError for an unusable document, DivergenceError when a loss or gradient goes non-finite.
 */
export async function tune(doc: ModelDoc, data: TuneData, options: TuneRunOptions = {}, hooks: TuneHooks = {}): Promise<TuneResult> {
  const opts = resolveTuneOptions(options, doc);
  const asked = options.path;
  if (asked !== undefined && !(TRAIN_PATHS as readonly string[]).includes(asked)) {
    throw new TuneConfigError('path', `must be one of ${TRAIN_PATHS.join(', ')}, got "${String(asked)}"`);
  }
  const rng = streams(opts.seed);

  const work = cloneDoc(doc);
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
  checkTargets(data, outputs, 'data');

  // Hold-out rows: a seeded split, or separate data.
  let train = asFloat32(data);
  let held: TuneData | null = null;
  if (opts.holdout.kind === 'fraction') {
    if (data.rows < 2) throw new TuneConfigError('holdout', `needs at least 2 rows, got ${data.rows}`);
    const split = splitHoldout(data.rows, opts.holdout.fraction, rng.split);
    train = subset(data, split.train, work.inputs, outputs);
    held = subset(data, split.holdout, work.inputs, outputs);
  } else if (opts.holdout.kind === 'data') {
    checkTargets(opts.holdout.data, outputs, 'holdoutData');
    held = asFloat32(opts.holdout.data);
  }
  const replay = opts.replay ? asFloat32(opts.replay.data) : null;
  if (replay) checkTargets(replay, outputs, 'replay');
  if (replay && (replay.y instanceof Int32Array) !== classifier) {
    throw new TuneConfigError('replay', 'targets must be of the same kind as the training data (class indices or values)');
  }

  // Normalisation: fit an empty block from the training rows; keep or continue a fitted one.
  const { path, fallback } = choosePath(asked, work);
  const runDiagnostics: Diagnostic[] = fallback ? [fallback] : [];
  runDiagnostics.push(...linearStacks(work.layers));
  if (work.normalise) {
    const policy = isUnfitted(work.normalise) ? 'continue' : opts.normalisation;
    work.normalise = updateNormalisation(work.normalise, train.x, train.rows, work.inputs, policy);
  } else {
    const raw = rawInputs(train.x, train.rows, work.inputs, false);
    if (raw) runDiagnostics.push(raw);
  }

  const slots = slotsOf(work, opts);
  const anchorStart = opts.anchor > 0 ? slots.map((s) => (s.frozen ? null : Float64Array.from(s.data))) : null;
  const optimiser = makeOptimiser(opts.optimiser, opts.decay);
  const gradientsChange = anchorStart !== null || opts.clipNorm !== null;
  const arrays = mutableArrays(work);
  const lastGood = snapshot(arrays);
  let best: Float32Array[] | null = null;
  const reluLayers = work.layers.flatMap((l, i) => (l.kind === 'dense' && l.activation === 'relu' && i !== work.layers.length - 1 ? [i] : []));
  const changedLayers = [...new Set(slots.filter((s) => !s.frozen).map((s) => s.layer))];
  work.layers.forEach((l, i) => {
    if (l.kind === 'batchnorm' && !opts.freeze.has(i) && !changedLayers.includes(i)) changedLayers.push(i);
  });

  const ctx: ForwardContext = {
    training: true,
    dropoutMask(_layer, rows, cols, rate) {
      const mask = new Float32Array(rows * cols);
      const keep = 1 / (1 - rate);
      for (let i = 0; i < mask.length; i++) mask[i] = rng.dropout.next() < rate ? 0 : keep;
      return mask;
    },
  };

  const backend = makeBackend(path, work, spec.input === 'logits');
  const batchesEach = Math.ceil(train.rows / opts.batch);
  const totalSteps = batchesEach * opts.epochs;
  const history: EpochRecord[] = [];
  const seen = new Set<string>();
  const diagnostics: Diagnostic[] = [...runDiagnostics];
  let bestLoss = Infinity;
  let bestEpoch = -1;
  let stoppedEarly = false;
  let aborted = false;
  let step = 0;
  let replayOrder: Int32Array | null = null;
  let replayAt = 0;

  const maxBatch = opts.batch + (opts.replay ? Math.max(1, opts.replay.perBatch >= 1 ? opts.replay.perBatch : Math.round(opts.replay.perBatch * opts.batch)) : 0);
  const xb = new Float32Array(maxBatch * work.inputs);
  const yClasses = new Int32Array(maxBatch);
  const yValues = new Float32Array(maxBatch * outputs);

  try {
    for (let epoch = 0; epoch < opts.epochs && !aborted; epoch++) {
      const started = performance.now();
      const batches = epochBatches(train.rows, opts.batch, rng.shuffle);
      const normSums = new Map<number, number>();
      let lossSum = 0;
      let anchorSum = 0;
      let rowsSeen = 0;
      let lr = opts.lr;
      for (let b = 0; b < batches.length; b++) {
        const idx = batches[b];
        let n = 0;
        const put = (src: TuneData, r: number) => {
          xb.set(src.x.subarray(r * work.inputs, (r + 1) * work.inputs), n * work.inputs);
          if (src.y instanceof Int32Array) yClasses[n] = src.y[r];
          else yValues.set(src.y.subarray(r * outputs, (r + 1) * outputs), n * outputs);
          n++;
        };
        for (const r of idx) put(train, r);
        if (replay && opts.replay) {
          const extra = opts.replay.perBatch >= 1 ? opts.replay.perBatch : Math.max(1, Math.round(opts.replay.perBatch * idx.length));
          for (let k = 0; k < extra; k++) {
            // Replay rows come from a seeded shuffle of the earlier data, cycled.
            if (!replayOrder || replayAt >= replayOrder.length) {
              replayOrder = shuffledOrder(replay.rows, rng.replay);
              replayAt = 0;
            }
            put(replay, replayOrder[replayAt++]);
          }
        }
        const targets: Targets = classifier ? { kind: 'classes', classes: yClasses.subarray(0, n) } : { kind: 'values', values: yValues.subarray(0, n * outputs) };

        const f = backend.forwardTrain(xb.subarray(0, n * work.inputs), n, ctx);
        const loss = computeLoss(spec, Float64Array.from(f.out), n, outputs, targets);
        const grads = backend.backward(f, loss.grad);

        // Per-layer squared gradient norms of the data loss (before anchor and clipping). One
        // pass serves both the norms and the divergence check: a sum of squares is finite
        // unless some value is not (or squares overflow, which allFinite then tells apart).
        const layerSq = new Map<number, number>();
        for (const s of slots) {
          layerSq.set(s.layer, (layerSq.get(s.layer) ?? 0) + sumSquares(grads[s.layer][s.position]));
        }
        // Divergence: name the first layer (in backward order) whose gradient is not finite.
        let bad = -1;
        for (let i = work.layers.length - 1; i >= 0 && bad < 0; i--) {
          if (!Number.isFinite(layerSq.get(i) ?? 0) && !grads[i].every(allFinite)) bad = i;
        }
        if (!Number.isFinite(loss.value) || bad >= 0) {
          restore(arrays, lastGood);
          throw new TuneDivergence(epoch + 1, b + 1, bad >= 0 ? layerLabel(work, bad) : 'the loss', `loss is ${loss.value}`, cloneDoc(work));
        }
        for (const [l, sq] of layerSq) normSums.set(l, (normSums.get(l) ?? 0) + Math.sqrt(sq));

        // Gradient list aligned with slots; frozen tensors get none. The backend's arrays go to
        // the optimiser as they are (it reads them into float64) unless the anchor or clipping
        // must change them. Anchor: d/dw strength·||w - w0||² = 2·strength·(w - w0).
        let anchorPenalty = 0;
        const flat = slots.map((s, k) => {
          if (s.frozen) return null;
          if (!gradientsChange) return grads[s.layer][s.position];
          const g = Float64Array.from(grads[s.layer][s.position]);
          const start = anchorStart?.[k];
          if (start) {
            for (let j = 0; j < g.length; j++) {
              const d = s.data[j] - start[j];
              anchorPenalty += opts.anchor * d * d;
              g[j] += 2 * opts.anchor * d;
            }
          }
          return g;
        });
        if (opts.clipNorm !== null) clipGlobalNorm(flat, opts.clipNorm);

        lr = rateAt(opts.schedule, opts.lr, { epoch, step, totalSteps });
        snapshot(arrays, lastGood);
        optimiser.step(slots, flat, lr);
        step++;

        // Running statistics of batch norm: old·momentum + batch·(1 - momentum); variance made
        // unbiased (n / (n - 1)) as inference expects a population estimate.
        work.layers.forEach((l, i) => {
          const stats = f.stats[i];
          if (l.kind !== 'batchnorm' || !stats || opts.freeze.has(i)) return;
          const m = l.momentum;
          const unbias = n > 1 ? n / (n - 1) : 1;
          for (let c = 0; c < l.runningMean.length; c++) {
            l.runningMean[c] = m * l.runningMean[c] + (1 - m) * stats.mean[c];
            l.runningVariance[c] = m * l.runningVariance[c] + (1 - m) * stats.variance[c] * unbias;
          }
        });

        const brokenAt = slots.find((s) => !s.frozen && !allFinite(s.data));
        if (brokenAt) {
          restore(arrays, lastGood);
          throw new TuneDivergence(epoch + 1, b + 1, layerLabel(work, brokenAt.layer), `the update made ${brokenAt.ref.name} non-finite (learning rate ${lr})`, cloneDoc(work));
        }
        backend.refresh(changedLayers);

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
      if (aborted) break;

      const seconds = (performance.now() - started) / 1000;
      const trainEval = evaluate(backend, work, train, spec, outputs, classifier, reluLayers);
      const heldEval = held ? evaluate(backend, work, held, spec, outputs, classifier, []) : null;
      const gradientNorms: Record<number, number> = {};
      const norms: LayerNorm[] = [];
      for (const [l, sum] of [...normSums].sort((a, b) => a[0] - b[0])) {
        gradientNorms[l] = sum / batches.length;
        norms.push({ layer: l, kind: work.layers[l].kind, norm: gradientNorms[l] });
      }
      const deadRelu: Record<number, number> = {};
      for (const s of trainEval.relu.deadShares()) deadRelu[s.layer] = s.dead / s.units;
      const epochDiagnostics = [...trainEval.relu.warnings(epoch)];
      const vanishing = vanishingGradient(norms, epoch);
      if (vanishing) epochDiagnostics.unshift(vanishing);
      for (const d of epochDiagnostics) {
        const key = `${d.code}:${d.layer ?? ''}`;
        if (!seen.has(key)) {
          seen.add(key);
          diagnostics.push(d);
        }
      }
      const record: EpochRecord = {
        epoch,
        batchLoss: lossSum / rowsSeen,
        anchorPenalty: anchorSum / batches.length,
        train: trainEval.metrics,
        holdout: heldEval ? heldEval.metrics : null,
        gradientNorms,
        deadRelu,
        lr,
        updates: batches.length,
        rowsPerSecond: rowsSeen / Math.max(seconds, 1e-9),
        diagnostics: epochDiagnostics,
      };
      history.push(record);
      hooks.onEpoch?.(record);

      if (heldEval) {
        if (heldEval.metrics.loss < bestLoss * (1 - IMPROVEMENT)) {
          bestLoss = heldEval.metrics.loss;
          bestEpoch = epoch;
          if (opts.patience !== null) best = snapshot(arrays, best ?? undefined);
        } else if (opts.patience !== null && epoch - bestEpoch >= opts.patience) {
          stoppedEarly = true;
          break;
        }
      } else {
        bestEpoch = epoch;
      }
    }
    if (opts.patience !== null && best && !aborted) {
      restore(arrays, best);
    } else {
      bestEpoch = history.length - 1;
    }
  } finally {
    backend.dispose();
  }

  const parent = parentProvenance(doc, options.parent);
  if (parent) work.provenance.push({ checksum: parent.checksum, source: parent.source, action: 'tune', at: new Date().toISOString() });
  return { doc: work, history, diagnostics, stoppedEarly, bestEpoch, aborted, loss: spec, path };
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
  const rng = new SeededRng(options.seed ?? 0);
  const ctx: ForwardContext = {
    training: true,
    dropoutMask(_l, rows, cols, rate) {
      const mask = new Float32Array(rows * cols);
      for (let i = 0; i < mask.length; i++) mask[i] = rng.next() < rate ? 0 : 1 / (1 - rate);
      return mask;
    },
  };
  const backend = makeBackend('reference', doc, spec.input === 'logits');
  const f = backend.forwardTrain(x, options.rows, ctx);
  const loss = computeLoss(spec, Float64Array.from(f.out), options.rows, outputs, targetsOf(y, 0, options.rows, outputs));
  const grads = backend.backward(f, loss.grad).map((l) => l.map((g) => Float64Array.from(g)));
  return { loss: loss.value, grads };
}
