/**
 * Build a model document from a JSON layer spec (the input of `tendon pack`). Every problem in
 * the spec is collected and reported together, each naming its place (e.g. `layers[1].weight`).
 *
 * A tensor is an inline (nested) array or a path to a .npy file, relative to the spec's folder.
 * A dense layer without weights is initialised from the seed.
 */
import { dirname, resolve } from 'node:path';
import { ModelFileError, type Problem } from '../errors.js';
import { BATCHNORM_RULES, DROPOUT_RATE_RULE, activationNames, isActivationName, isLayerKindName } from '../model/index.js';
import { STORAGE_CODECS, type Layer, type LayerKindName, type ModelDoc, type Normalisation, type StorageCodec } from '../model/types.js';
import { DEFAULT_LEAKY_ALPHA, initDense } from '../model/init.js';
import { SeededRng } from '../model/rng.js';

/** A loaded tensor: its shape and values in row-major order. */
export interface LoadedTensor {
  readonly shape: readonly number[];
  readonly data: ArrayLike<number>;
}

/** Reads a .npy tensor; injected so this module stays free of file formats. */
export type TensorFileLoader = (absolutePath: string) => Promise<LoadedTensor>;

export interface SpecOptions {
  /** Seed for weights the spec leaves out. */
  readonly seed?: number;
  /** Storage codec; overrides the spec's own `store`. */
  readonly store?: StorageCodec;
  readonly loadTensorFile: TensorFileLoader;
  /** Time written into the metadata; defaults to now. */
  readonly now?: Date;
}

const DEFAULT_SEED = 1;
const DEFAULT_BN_EPSILON = 1e-5;
const DEFAULT_BN_MOMENTUM = 0.9;

/**
 * @example const doc = await buildFromSpec(JSON.parse(text), 'spec.json', { loadTensorFile })
 * @throws ModelFileError listing every problem of the spec.
 */
export async function buildFromSpec(spec: unknown, specPath: string, options: SpecOptions): Promise<ModelDoc> {
  const problems: Problem[] = [];
  const here = dirname(resolve(specPath));
  const rng = new SeededRng(options.seed ?? DEFAULT_SEED);
  const fail = (where: string, message: string): undefined => {
    problems.push({ where, message });
    return undefined;
  };

  if (!isObject(spec)) throw new ModelFileError(specPath, [{ where: '', message: 'the spec must be a JSON object' }]);
  const known = new Set(['inputs', 'features', 'labels', 'normalise', 'layers', 'name', 'description', 'store']);
  for (const key of Object.keys(spec)) if (!known.has(key)) fail(key, `unknown field (known: ${[...known].join(', ')})`);

  const inputs = positiveInt(spec.inputs, 'inputs', fail);
  const features = stringList(spec.features, 'features', fail);
  const labels = stringList(spec.labels, 'labels', fail);
  if (inputs !== undefined && features && features.length !== inputs) {
    fail('features', `has ${features.length} names for ${inputs} inputs`);
  }

  const loadVector = async (value: unknown, where: string, length: number | undefined): Promise<Float64Array | undefined> => {
    const t = await loadTensor(value, where, here, options.loadTensorFile, fail);
    if (!t) return undefined;
    if (t.shape.length !== 1 && !(t.shape.length === 2 && t.shape[0] === 1)) {
      return fail(where, `must be a vector, got shape [${t.shape.join(', ')}]`);
    }
    if (length !== undefined && t.data.length !== length) return fail(where, `has ${t.data.length} values, expected ${length}`);
    return Float64Array.from(t.data);
  };

  const normalise = spec.normalise === undefined ? null : await readNormalise(spec.normalise, inputs, loadVector, fail);

  const layers: Layer[] = [];
  if (!Array.isArray(spec.layers) || spec.layers.length === 0) fail('layers', 'must be a non-empty list');
  let width = inputs;
  for (const [i, raw] of (Array.isArray(spec.layers) ? spec.layers : []).entries()) {
    const where = `layers[${i}]`;
    if (!isObject(raw)) {
      fail(where, 'must be an object with a "kind"');
      width = undefined;
      continue;
    }
    const layer = await buildLayer(raw, where, width, { rng, here, options, fail, loadVector });
    if (layer) {
      layers.push(layer.layer);
      width = layer.outputWidth;
    } else {
      width = undefined;
    }
  }
  if (labels && width !== undefined && labels.length !== width) {
    fail('labels', `has ${labels.length} names for ${width} outputs`);
  }
  let storage: StorageCodec = 'f32';
  if (options.store) storage = options.store;
  else if (spec.store !== undefined) {
    if (typeof spec.store === 'string' && (STORAGE_CODECS as readonly string[]).includes(spec.store)) storage = spec.store as StorageCodec;
    else fail('store', `must be one of ${STORAGE_CODECS.join(', ')}`);
  }

  if (problems.length > 0 || inputs === undefined) throw new ModelFileError(specPath, problems);
  return {
    inputs,
    features: features ?? null,
    labels: labels ?? null,
    normalise,
    layers,
    meta: {
      name: typeof spec.name === 'string' ? spec.name : '',
      description: typeof spec.description === 'string' ? spec.description : '',
      created: (options.now ?? new Date()).toISOString(),
      extra: {},
    },
    provenance: [],
    storage,
  };
}

/** The "normalise" block: z-score or min-max statistics, or none given (to fit them from data). */
async function readNormalise(n: unknown, inputs: number | undefined, loadVector: LayerContext['loadVector'], fail: Fail): Promise<Normalisation | null> {
  if (!isObject(n)) fail('normalise', 'must be an object with a "method"');
  else if (n.method === 'zscore') {
    const count = n.count === undefined ? 0 : (nonNegativeInt(n.count, 'normalise.count', fail) ?? 0);
    const mean = n.mean === undefined ? null : ((await loadVector(n.mean, 'normalise.mean', inputs)) ?? null);
    const std = n.std === undefined ? null : ((await loadVector(n.std, 'normalise.std', inputs)) ?? null);
    if ((mean === null) !== (std === null)) fail('normalise', 'give both mean and std, or neither (to fit them from data)');
    std?.forEach((s, i) => (s > 0 ? undefined : fail(`normalise.std[${i}]`, `must be > 0, got ${s}`)));
    const m2 = std ? std.map((s) => s * s * count) : null;
    return { method: 'zscore', mean, std, m2, count };
  } else if (n.method === 'minmax') {
    const count = n.count === undefined ? 0 : (nonNegativeInt(n.count, 'normalise.count', fail) ?? 0);
    const min = n.min === undefined ? null : ((await loadVector(n.min, 'normalise.min', inputs)) ?? null);
    const max = n.max === undefined ? null : ((await loadVector(n.max, 'normalise.max', inputs)) ?? null);
    if ((min === null) !== (max === null)) fail('normalise', 'give both min and max, or neither (to fit them from data)');
    if (min && max) min.forEach((lo, i) => (max[i] >= lo ? undefined : fail(`normalise.max[${i}]`, `is below min (${max[i]} < ${lo})`)));
    return { method: 'minmax', min, max, count };
  } else {
    fail('normalise.method', `must be "zscore" or "minmax", got ${JSON.stringify(n.method)}`);
  }
  return null;
}

type Fail = (where: string, message: string) => undefined;

interface LayerContext {
  readonly rng: SeededRng;
  readonly here: string;
  readonly options: SpecOptions;
  readonly fail: Fail;
  readonly loadVector: (value: unknown, where: string, length: number | undefined) => Promise<Float64Array | undefined>;
}

async function buildLayer(
  raw: Record<string, unknown>,
  where: string,
  width: number | undefined,
  ctx: LayerContext,
): Promise<{ layer: Layer; outputWidth: number | undefined } | undefined> {
  const { fail, loadVector } = ctx;
  // Typed by every layer kind: a new kind fails to compile here until it lists its spec fields.
  const allowed: Record<LayerKindName, string[]> = {
    dense: ['kind', 'size', 'activation', 'weight', 'bias', 'alpha'],
    batchnorm: ['kind', 'gamma', 'beta', 'mean', 'variance', 'epsilon', 'momentum'],
    dropout: ['kind', 'rate'],
  };
  const kind = raw.kind;
  if (typeof kind !== 'string' || !isLayerKindName(kind)) {
    return fail(`${where}.kind`, `must be one of ${Object.keys(allowed).join(', ')}, got ${JSON.stringify(kind)}`);
  }
  for (const key of Object.keys(raw)) {
    if (!allowed[kind].includes(key)) fail(`${where}.${key}`, `is not a field of a ${kind} layer (fields: ${allowed[kind].join(', ')})`);
  }

  if (kind === 'dropout') {
    const rate = raw.rate === undefined ? 0.5 : raw.rate;
    if (!DROPOUT_RATE_RULE.ok(rate)) return fail(`${where}.rate`, `must be a number ${DROPOUT_RATE_RULE.rule}, got ${JSON.stringify(raw.rate)}`);
    return { layer: { kind: 'dropout', rate }, outputWidth: width };
  }

  if (kind === 'batchnorm') return buildBatchnorm(raw, where, width, ctx);

  // Every other kind returned above: a new kind fails to compile here until it has its branch.
  if (kind !== 'dense') throw new Error(`buildLayer: unhandled layer kind ${String(kind satisfies never)}`);
  const units = positiveInt(raw.size, `${where}.size`, fail);
  const activation = raw.activation === undefined ? 'linear' : raw.activation;
  if (!isActivationName(activation)) {
    fail(`${where}.activation`, `must be one of ${activationNames().join(', ')}, got ${JSON.stringify(raw.activation)}`);
  }
  const alpha = raw.alpha === undefined ? DEFAULT_LEAKY_ALPHA : raw.alpha;
  if (typeof alpha !== 'number' || !Number.isFinite(alpha)) fail(`${where}.alpha`, `must be a number, got ${JSON.stringify(raw.alpha)}`);
  if (units === undefined) return undefined;
  if (width === undefined || !isActivationName(activation) || typeof alpha !== 'number') return { layer: placeholder(units), outputWidth: units };
  const act = activation;

  let weight: Float32Array | undefined;
  let bias: Float32Array | undefined;
  if (raw.weight !== undefined) {
    const t = await loadTensor(raw.weight, `${where}.weight`, ctx.here, ctx.options.loadTensorFile, fail);
    if (t) {
      if (t.shape.length !== 2 || t.shape[0] !== width || t.shape[1] !== units) {
        fail(`${where}.weight`, `has shape [${t.shape.join(', ')}], expected [${width}, ${units}] (inputs x size)`);
      } else {
        weight = Float32Array.from(t.data);
      }
    }
  }
  if (raw.bias !== undefined) {
    const b = await loadVector(raw.bias, `${where}.bias`, units);
    if (b) bias = Float32Array.from(b);
  }
  if (raw.weight === undefined) {
    const init = initDense(width, units, act, ctx.rng, alpha);
    weight = init.weight;
    if (raw.bias === undefined) bias = init.bias;
  } else if (raw.bias === undefined) {
    bias = new Float32Array(units);
  }
  if (!weight || !bias) return { layer: placeholder(units), outputWidth: units };
  return { layer: { kind: 'dense', size: units, activation: act, alpha, weight, bias }, outputWidth: units };
}

/** A batchnorm layer: epsilon and momentum in range, and vectors of the layer width (defaults: scale 1, shift 0, mean 0, variance 1). */
async function buildBatchnorm(
  raw: Record<string, unknown>,
  where: string,
  width: number | undefined,
  ctx: LayerContext,
): Promise<{ layer: Layer; outputWidth: number | undefined } | undefined> {
  const { fail, loadVector } = ctx;
  const epsilon = raw.epsilon === undefined ? DEFAULT_BN_EPSILON : raw.epsilon;
  const momentum = raw.momentum === undefined ? DEFAULT_BN_MOMENTUM : raw.momentum;
  if (!BATCHNORM_RULES.epsilon.ok(epsilon)) fail(`${where}.epsilon`, `must be ${BATCHNORM_RULES.epsilon.rule}, got ${JSON.stringify(raw.epsilon)}`);
  if (!BATCHNORM_RULES.momentum.ok(momentum)) fail(`${where}.momentum`, `must be ${BATCHNORM_RULES.momentum.rule}, got ${JSON.stringify(raw.momentum)}`);
  if (width === undefined) return undefined;
  const vector = async (name: string, fill: number) =>
    raw[name] === undefined ? new Float64Array(width).fill(fill) : await loadVector(raw[name], `${where}.${name}`, width);
  const [gamma, beta, mean, variance] = [await vector('gamma', 1), await vector('beta', 0), await vector('mean', 0), await vector('variance', 1)];
  variance?.forEach((v, j) => (v >= 0 ? undefined : fail(`${where}.variance[${j}]`, `must be >= 0, got ${v}`)));
  if (!gamma || !beta || !mean || !variance || typeof epsilon !== 'number' || typeof momentum !== 'number') return undefined;
  return {
    layer: {
      kind: 'batchnorm',
      gamma: Float32Array.from(gamma),
      beta: Float32Array.from(beta),
      runningMean: Float32Array.from(mean),
      runningVariance: Float32Array.from(variance),
      epsilon,
      momentum,
    },
    outputWidth: width,
  };
}

/** Stands in for a layer with problems so later layers are still checked against its width. */
function placeholder(units: number): Layer {
  return { kind: 'dense', size: units, activation: 'linear', alpha: 0, weight: new Float32Array(0), bias: new Float32Array(units) };
}

async function loadTensor(value: unknown, where: string, here: string, loadFile: TensorFileLoader, fail: Fail): Promise<LoadedTensor | undefined> {
  if (typeof value === 'string') {
    const path = resolve(here, value);
    try {
      const t = await loadFile(path);
      return checkFinite(t, where, fail);
    } catch (error) {
      return fail(where, `cannot read ${value}: ${error instanceof Error ? error.message : String(error)}`);
    }
  }
  if (!Array.isArray(value)) return fail(where, 'must be a nested array of numbers or a path to a .npy file');
  const shape: number[] = [];
  let probe: unknown = value;
  while (Array.isArray(probe)) {
    shape.push(probe.length);
    probe = probe[0];
  }
  const data: number[] = [];
  const walk = (node: unknown, depth: number, path: string): boolean => {
    if (depth === shape.length) {
      if (typeof node !== 'number') {
        fail(`${where}${path}`, `must be a number, got ${JSON.stringify(node)}`);
        return false;
      }
      data.push(node);
      return true;
    }
    if (!Array.isArray(node) || node.length !== shape[depth]) {
      fail(`${where}${path}`, `ragged array: expected ${shape[depth]} entries at depth ${depth}`);
      return false;
    }
    return node.every((child, k) => walk(child, depth + 1, `${path}[${k}]`));
  };
  if (!walk(value, 0, '')) return undefined;
  return checkFinite({ shape, data }, where, fail);
}

function checkFinite(t: LoadedTensor, where: string, fail: Fail): LoadedTensor | undefined {
  for (let i = 0; i < t.data.length; i++) {
    if (!Number.isFinite(t.data[i])) return fail(where, `value ${i} is ${t.data[i]}; every value must be finite`);
  }
  return t;
}

function isObject(value: unknown): value is Record<string, unknown> {
  return typeof value === 'object' && value !== null && !Array.isArray(value);
}

function positiveInt(value: unknown, where: string, fail: Fail): number | undefined {
  if (typeof value === 'number' && Number.isInteger(value) && value > 0) return value;
  return fail(where, `must be a whole number > 0, got ${JSON.stringify(value)}`);
}

function nonNegativeInt(value: unknown, where: string, fail: Fail): number | undefined {
  if (typeof value === 'number' && Number.isInteger(value) && value >= 0) return value;
  return fail(where, `must be a whole number >= 0, got ${JSON.stringify(value)}`);
}

function stringList(value: unknown, where: string, fail: Fail): string[] | undefined {
  if (value === undefined) return undefined;
  if (!Array.isArray(value) || !value.every((v) => typeof v === 'string' && v.length > 0)) {
    return fail(where, 'must be a list of non-empty strings');
  }
  const seen = new Set<string>();
  for (const name of value as string[]) {
    if (seen.has(name)) fail(where, `"${name}" appears twice`);
    seen.add(name);
  }
  return value as string[];
}
