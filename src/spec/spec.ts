/**
 * Build a model document from a JSON layer spec (the input of `tendon pack`). Every problem in
 * the spec is collected and reported together, each naming its place (e.g. `layers[1].weight`).
 *
 * A tensor is an inline (nested) array or a path to a .npy file, relative to the spec's folder.
 * Each layer's fields, their rules and defaults are its kind's declared fields (`stored` in
 * src/model/layers/<kind>.ts); a tensor declared 'drawn' (dense weights) that the spec leaves
 * out gets the kind's starting values from the seed.
 */
import { dirname, resolve } from 'node:path';
import { ModelFileError, type Problem } from '../errors.js';
import {
  COUNT_RULE,
  activationNames,
  fieldShape,
  isActivationName,
  isLayerKindName,
  layerKind,
  layerKindNames,
  storedForm,
  type AnyField,
  type FieldValues,
} from '../model/index.js';
import { STORAGE_CODECS, type Layer, type ModelDoc, type Normalisation, type StorageCodec } from '../model/types.js';
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
    const layer = await buildLayer(raw, where, width, { rng, here, options, fail, problems, loadVector });
    if (layer) {
      if (layer.layer) layers.push(layer.layer);
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
  /** Every problem so far (a layer is built only when it added none). */
  readonly problems: readonly Problem[];
  readonly loadVector: (value: unknown, where: string, length: number | undefined) => Promise<Float64Array | undefined>;
}

async function buildLayer(
  raw: Record<string, unknown>,
  where: string,
  width: number | undefined,
  ctx: LayerContext,
): Promise<{ layer: Layer | undefined; outputWidth: number | undefined } | undefined> {
  const { fail } = ctx;
  const kind = raw.kind;
  if (typeof kind !== 'string' || !isLayerKindName(kind)) {
    return fail(`${where}.kind`, `must be one of ${layerKindNames().join(', ')}, got ${JSON.stringify(kind)}`);
  }
  // A layer's spec fields are its kind's declared fields (src/model/layers/<kind>.ts), under their spec names.
  const form = storedForm(kind);
  const allowed = ['kind', ...form.fields.map((f) => f.spec)];
  for (const key of Object.keys(raw)) {
    if (!allowed.includes(key)) fail(`${where}.${key}`, `is not a field of a ${kind} layer (fields: ${allowed.join(', ')})`);
  }
  const before = ctx.problems.length;
  const values: FieldValues = { kind };
  for (const field of form.fields) if (field.type !== 'tensor') readScalar(field, raw[field.spec], `${where}.${field.spec}`, values, fail);
  if (form.fields.some((f) => f.type === 'count' && values[f.key] === undefined)) return undefined;
  const outputWidth = form.output === 'in' ? width : (values[form.output] as number);
  if (width === undefined) return { layer: undefined, outputWidth };

  const drawn: string[] = [];
  for (const field of form.fields) {
    if (field.type !== 'tensor') continue;
    const at = `${where}.${field.spec}`;
    const shape = fieldShape(field, values, width) ?? [];
    if (raw[field.spec] === undefined) {
      if (field.start === 'drawn') drawn.push(field.key);
      values[field.key] = field.start === 'drawn' ? new Float32Array(0) : new Float32Array(shape.reduce((a, b) => a * b, 1)).fill(field.start);
      continue;
    }
    const data = shape.length === 1 ? await ctx.loadVector(raw[field.spec], at, shape[0]) : await loadShaped(raw[field.spec], at, shape, field, ctx);
    if (!data) continue;
    const rule = field.each;
    if (rule) Array.from(data).forEach((v, j) => (rule.ok(v) ? undefined : fail(`${at}[${j}]`, `must be ${rule.rule}, got ${v}`)));
    values[field.key] = Float32Array.from(data);
  }
  if (ctx.problems.length > before) return { layer: undefined, outputWidth };
  // One typed adapter: the document built field by field by the names its kind declares.
  const layer = values as unknown as Layer;
  if (drawn.length === 0) return { layer, outputWidth };
  // Starting values the kind draws from the seed (dense: He / Glorot weights), for the fields the spec left out.
  const filled = (layerKind(kind).fillEmpty(layer as never, width, ctx.rng) ?? layer) as unknown as FieldValues;
  for (const key of drawn) values[key] = filled[key];
  return { layer, outputWidth };
}

/** A count, number or activation from the spec, or its default; a problem naming the rule otherwise. */
function readScalar(field: Exclude<AnyField, { type: 'tensor' }>, given: unknown, where: string, values: FieldValues, fail: Fail): void {
  if (field.type === 'activation') {
    const activation = given === undefined ? field.default : given;
    if (isActivationName(activation)) values[field.key] = activation;
    else fail(where, `must be one of ${activationNames().join(', ')}, got ${JSON.stringify(given)}`);
    return;
  }
  const value = given === undefined && field.type === 'number' ? field.default : given;
  const rule = field.type === 'count' ? COUNT_RULE : field.rule;
  if (typeof value === 'number' && rule.ok(value)) values[field.key] = value;
  else fail(where, `must be ${rule.rule}, got ${JSON.stringify(given)}`);
}

/** A tensor of more than one dimension, of exactly the declared shape. */
async function loadShaped(
  value: unknown,
  where: string,
  shape: number[],
  field: AnyField & { type: 'tensor' },
  ctx: LayerContext,
): Promise<ArrayLike<number> | undefined> {
  const t = await loadTensor(value, where, ctx.here, ctx.options.loadTensorFile, ctx.fail);
  if (!t) return undefined;
  if (t.shape.length !== shape.length || t.shape.some((d, i) => d !== shape[i])) {
    const words = field.shape.map((dim) => (dim === 'in' ? 'inputs' : dim)).join(' x ');
    return ctx.fail(where, `has shape [${t.shape.join(', ')}], expected [${shape.join(', ')}] (${words})`);
  }
  return t.data;
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
