/**
 * Folding for inference: a pure document transform that returns an equivalent model with fewer
 * layers and no input normalisation step. Every fold is an exact algebraic identity; a step
 * that cannot be folded exactly is left as it is and named in the returned steps.
 *
 * Identities used (x a row, W [inputs, outputs], a·x per feature):
 * - affine map before a dense layer, u = a ⊙ x + c:  u·W + b = x·(diag(a)·W) + (c·W + b)
 *   (z-score: a = 1/std, c = -mean/std; min-max: a = 1/(max - min), c = -min/(max - min);
 *   batch normalisation at inference: a = gamma / sqrt(var + eps), c = beta - a ⊙ mean).
 * - affine map after a linear dense layer: a ⊙ (x·W + b) + c = x·(W·diag(a)) + (a ⊙ b + c).
 * - two dense layers, the first linear: (x·W1 + b1)·W2 + b2 = x·(W1·W2) + (b1·W2 + b2).
 * - dropout is the identity at inference.
 *
 * Each layer kind says what it is at inference (its `simd.inference` form: a dense product, a
 * per-feature affine map, or the identity); a kind with no such form is kept as it is.
 *
 * The arithmetic runs in float64 on the float32 weights and is rounded to float32 once, at the end.
 */
import { checksumOf, encodeModel } from '../format/index.js';
import {
  inputAffine,
  layerKind,
  layerOutputWidth,
  validateModel,
  type ActivationName,
  type Layer,
  type LayerKindName,
  type ModelDoc,
  type Normalisation,
} from '../model/index.js';

/** A layer kind folded or kept (batchnorm, dropout, ...), the input normalisation, or a product of two dense layers. */
export type FoldStepName = LayerKindName | 'normalisation' | 'linear-collapse';

export interface FoldStep {
  readonly step: FoldStepName;
  /** Indices of the layers involved, in the original document (empty for normalisation alone). */
  readonly layers: number[];
  readonly folded: boolean;
  /** Why a step was left as it is (or a note on what was kept). */
  readonly reason?: string;
}

export interface FoldResult {
  readonly doc: ModelDoc;
  readonly steps: FoldStep[];
}

export interface FoldOptions {
  /** The parent file, for provenance; computed from the document when not given. */
  readonly parent?: { checksum: string; source: string };
  /** ISO 8601 time for the provenance record; default now. */
  readonly at?: string;
}

/** Key in meta.extra that keeps a folded normalisation's statistics, so drift checks still have a baseline. */
export const FOLDED_NORMALISATION_KEY = 'folded_normalisation';

/** A dense layer held in float64 while folds are applied. */
interface WorkDense {
  readonly kind: 'dense';
  readonly origin: number[];
  inputs: number;
  size: number;
  activation: ActivationName;
  alpha: number;
  weight: Float64Array;
  bias: Float64Array;
}

/** A layer that is a per-feature affine map at inference, y = scale ⊙ x + shift (batch normalisation). */
interface WorkAffine {
  readonly kind: 'affine';
  readonly origin: number[];
  readonly layer: Layer;
  readonly scale: Float64Array;
  readonly shift: Float64Array;
}

/** A layer that is the identity at inference (dropout), or one without an inference form (kept). */
interface WorkOther {
  readonly kind: 'identity' | 'kept';
  readonly origin: number[];
  readonly layer: Layer;
}

type Work = WorkDense | WorkAffine | WorkOther;

/** The layer kind a work item stands for, for steps and messages. */
function kindOf(w: Work): LayerKindName {
  return w.kind === 'dense' ? 'dense' : w.layer.kind;
}

/**
 * Fold a model for inference. The input document is never changed.
 * @example
 * const { doc: fast, steps } = foldModel(doc);
 * steps.filter((s) => !s.folded) // what was left as it is, with the reason
 */
export function foldModel(doc: ModelDoc, options: FoldOptions = {}): FoldResult {
  validateModel(doc, doc.meta.name || '(model to fold)');
  const steps: FoldStep[] = [];
  let work = toWork(doc);

  // Dropout first: removing identities makes neighbours adjacent for the folds that follow.
  work = work.filter((w) => {
    if (w.kind !== 'identity') return true;
    steps.push({ step: kindOf(w), layers: [...w.origin], folded: true, reason: 'identity at inference' });
    return false;
  });

  work = foldBatchNorms(work, steps);
  let normalise = doc.normalise;
  const extra = { ...doc.meta.extra };
  const normStep = foldNormalisation(work, normalise);
  steps.push(normStep.step);
  if (normStep.step.folded && normalise) {
    extra[FOLDED_NORMALISATION_KEY] = normalisationJson(normalise);
    normalise = null;
  }
  work = collapseLinear(work, steps);

  const parent = options.parent ?? {
    checksum: checksumOf(encodeModel(doc)),
    source: doc.meta.name ? `${doc.meta.name}, held in memory` : 'a model held in memory',
  };
  const folded: ModelDoc = {
    inputs: doc.inputs,
    features: doc.features ? [...doc.features] : null,
    labels: doc.labels ? [...doc.labels] : null,
    normalise: normalise ? copyNormalisation(normalise) : null,
    // Kept as it is: every fold leaves the last dense layer linear, which is all it needs.
    ...(doc.targetScaling ? { targetScaling: { mean: doc.targetScaling.mean.slice(), std: doc.targetScaling.std.slice() } } : {}),
    layers: work.map(fromWork),
    meta: { ...doc.meta, extra },
    provenance: [...doc.provenance, { checksum: parent.checksum, source: parent.source, action: 'folded', at: options.at ?? new Date().toISOString() }],
    storage: doc.storage,
    // Folding keeps the output layer's logits, so a calibration temperature still fits them.
    ...(doc.temperature !== undefined ? { temperature: doc.temperature } : {}),
  };
  validateModel(folded, '(folded model)');
  return { doc: folded, steps };
}

function toWork(doc: ModelDoc): Work[] {
  let width = doc.inputs;
  return doc.layers.map((layer, i): Work => {
    const inputs = width;
    width = layerOutputWidth(layer, width);
    const part = layerKind(layer.kind).simd.inference;
    if (typeof part !== 'function') return { kind: 'kept', origin: [i], layer };
    const form = part(layer);
    switch (form.op) {
      case 'dense':
        return {
          kind: 'dense',
          origin: [i],
          inputs,
          size: form.size,
          activation: form.activation,
          alpha: form.alpha,
          weight: Float64Array.from(form.weight),
          bias: Float64Array.from(form.bias),
        };
      case 'affine':
        return { kind: 'affine', origin: [i], layer, scale: form.scale, shift: form.shift };
      case 'identity':
        return { kind: 'identity', origin: [i], layer };
      default:
        throw new Error(`fold: unknown inference form ${String(form satisfies never)}`);
    }
  });
}

function fromWork(w: Work): Layer {
  if (w.kind !== 'dense') return w.layer;
  // The one rounding to float32 of every folded value.
  return { kind: 'dense', size: w.size, activation: w.activation, alpha: w.alpha, weight: Float32Array.from(w.weight), bias: Float32Array.from(w.bias) };
}

/** Per-feature u = a ⊙ x + c absorbed by the dense layer that reads u. */
function absorbBefore(dense: WorkDense, a: ArrayLike<number>, c: ArrayLike<number>): void {
  const { inputs, size: units, weight, bias } = dense;
  for (let k = 0; k < inputs; k++) {
    for (let j = 0; j < units; j++) {
      const w = weight[k * units + j];
      bias[j] += c[k] * w;
      weight[k * units + j] = a[k] * w;
    }
  }
}

/** Per-unit a ⊙ y + c applied after a linear dense layer, absorbed into that layer. */
function absorbAfter(dense: WorkDense, a: ArrayLike<number>, c: ArrayLike<number>): void {
  const { inputs, size: units, weight, bias } = dense;
  for (let k = 0; k < inputs; k++) for (let j = 0; j < units; j++) weight[k * units + j] *= a[j];
  for (let j = 0; j < units; j++) bias[j] = a[j] * bias[j] + c[j];
}

function foldBatchNorms(work: Work[], steps: FoldStep[]): Work[] {
  const out: Work[] = [];
  for (let i = 0; i < work.length; i++) {
    const w = work[i];
    if (w.kind !== 'affine') {
      out.push(w);
      continue;
    }
    // E.g. batch normalisation at inference (Ioffe and Szegedy, 2015): the kind gives the map.
    const { scale: a, shift: c } = w;
    const step = kindOf(w);
    const before = out[out.length - 1];
    const after = work[i + 1];
    if (before?.kind === 'dense' && before.activation === 'linear') {
      absorbAfter(before, a, c);
      before.origin.push(...w.origin);
      steps.push({ step, layers: [...w.origin], folded: true, reason: `into the linear dense layer before it (layers[${before.origin[0]}])` });
    } else if (after?.kind === 'dense') {
      absorbBefore(after, a, c);
      after.origin.unshift(...w.origin);
      steps.push({ step, layers: [...w.origin], folded: true, reason: `into the dense layer after it (layers[${after.origin[after.origin.length - 1]}])` });
    } else {
      const why =
        before?.kind === 'dense'
          ? `the dense layer before it applies ${before.activation}, so the affine map cannot move inside it, and no dense layer follows`
          : 'no linear dense layer before it and no dense layer after it';
      steps.push({ step, layers: [...w.origin], folded: false, reason: why });
      out.push(w);
    }
  }
  return out;
}

function foldNormalisation(work: Work[], norm: Normalisation | null): { step: FoldStep } {
  const step = (folded: boolean, reason: string): { step: FoldStep } => ({ step: { step: 'normalisation', layers: [], folded, reason } });
  if (!norm) return step(false, 'the model has no input normalisation');
  const affine = inputAffine(norm);
  if (!affine) return step(false, `the ${norm.method} statistics are not fitted yet (a first tune fits them)`);
  const first = work[0];
  if (first?.kind !== 'dense') return step(false, `the first remaining layer is ${first ? kindOf(first) : 'missing'}, not dense`);
  const { centre, spread } = affine;
  const flat = spread.findIndex((s) => s === 0);
  if (flat >= 0) {
    // Kept rather than zeroing the weight row: a later tune that continues the statistics
    // could give the feature a spread again, and a folded model could not recover it.
    return step(false, `feature ${flat} has zero ${norm.method === 'zscore' ? 'standard deviation' : 'range'}; the ${norm.method} block is kept`);
  }
  const a = spread.map((s) => 1 / s);
  const c = centre.map((m, k) => -m / spread[k]);
  absorbBefore(first, a, c);
  return step(true, `${norm.method} into layers[${first.origin[0]}]; its statistics kept in meta.extra.${FOLDED_NORMALISATION_KEY} for drift checks`);
}

function collapseLinear(work: Work[], steps: FoldStep[]): Work[] {
  const out: Work[] = [];
  for (const w of work) {
    const prev = out[out.length - 1];
    if (w.kind === 'dense' && prev?.kind === 'dense' && prev.activation === 'linear') {
      const pairParams = prev.inputs * prev.size + prev.size + w.inputs * w.size + w.size;
      const productParams = prev.inputs * w.size + w.size;
      const layers = [...prev.origin, ...w.origin];
      if (productParams > pairParams) {
        steps.push({
          step: 'linear-collapse',
          layers,
          folded: false,
          reason: `the product would hold ${productParams} parameters, more than the pair's ${pairParams} (a ${prev.size}-unit bottleneck)`,
        });
        out.push(w);
        continue;
      }
      out[out.length - 1] = multiply(prev, w);
      steps.push({ step: 'linear-collapse', layers, folded: true });
      continue;
    }
    out.push(w);
  }
  return out;
}

/** W = W1·W2, b = b1·W2 + b2; the result takes the second layer's activation. */
function multiply(first: WorkDense, second: WorkDense): WorkDense {
  const n = first.inputs;
  const m = first.size;
  const p = second.size;
  const weight = new Float64Array(n * p);
  for (let i = 0; i < n; i++) {
    for (let k = 0; k < m; k++) {
      const v = first.weight[i * m + k];
      if (v === 0) continue;
      for (let j = 0; j < p; j++) weight[i * p + j] += v * second.weight[k * p + j];
    }
  }
  const bias = Float64Array.from(second.bias);
  for (let k = 0; k < m; k++) for (let j = 0; j < p; j++) bias[j] += first.bias[k] * second.weight[k * p + j];
  return {
    kind: 'dense',
    origin: [...first.origin, ...second.origin],
    inputs: n,
    size: p,
    activation: second.activation,
    alpha: second.alpha,
    weight,
    bias,
  };
}

function copyNormalisation(n: Normalisation): Normalisation {
  const copy = (v: Float64Array | null) => (v ? Float64Array.from(v) : null);
  return n.method === 'zscore'
    ? { method: 'zscore', mean: copy(n.mean), std: copy(n.std), m2: copy(n.m2), count: n.count }
    : { method: 'minmax', min: copy(n.min), max: copy(n.max), count: n.count };
}

function normalisationJson(n: Normalisation): string {
  const list = (v: Float64Array | null) => (v ? Array.from(v) : null);
  return JSON.stringify(
    n.method === 'zscore'
      ? { method: 'zscore', mean: list(n.mean), std: list(n.std), count: n.count }
      : { method: 'minmax', min: list(n.min), max: list(n.max), count: n.count },
  );
}

/**
 * The normalisation statistics of a model: its own block, or the ones a fold kept in meta.extra.
 * @example baselineNormalisation(foldModel(doc).doc) // the statistics doc.normalise held
 */
export function baselineNormalisation(doc: ModelDoc): Normalisation | null {
  if (doc.normalise) return doc.normalise;
  const text = doc.meta.extra[FOLDED_NORMALISATION_KEY];
  if (!text) return null;
  try {
    const parsed: unknown = JSON.parse(text);
    return parseKeptNormalisation(parsed, doc.inputs);
  } catch {
    return null;
  }
}

function numbers(v: unknown, n: number): Float64Array | null {
  if (!Array.isArray(v) || v.length !== n || !v.every((x) => typeof x === 'number' && Number.isFinite(x))) return null;
  return Float64Array.from(v as number[]);
}

function parseKeptNormalisation(v: unknown, inputs: number): Normalisation | null {
  if (typeof v !== 'object' || v === null) return null;
  const o = v as Record<string, unknown>;
  const count = typeof o.count === 'number' ? o.count : 0;
  if (o.method === 'zscore') {
    const mean = numbers(o.mean, inputs);
    const std = numbers(o.std, inputs);
    return mean && std ? { method: 'zscore', mean, std, m2: null, count } : null;
  }
  if (o.method === 'minmax') {
    const min = numbers(o.min, inputs);
    const max = numbers(o.max, inputs);
    return min && max ? { method: 'minmax', min, max, count } : null;
  }
  return null;
}
