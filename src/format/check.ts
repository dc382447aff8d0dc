/**
 * Payload objects -> ModelDoc, checking everything on the way and collecting every problem.
 * Problems name the payload field they are about, e.g. "layers[1].dense.weight".
 *
 * The running width is tracked through the layers (dense: its size; batchnorm and dropout:
 * unchanged) so each layer's incoming width is checked here too, and the file check needs
 * nothing from the model layer.
 */
import type { Problem } from '../errors.js';
import { BATCHNORM_RULES, DROPOUT_RATE_RULE, activationByCode, activationNames, activationKind, activationRangeProblems } from '../model/index.js';
import { LAYER_KINDS } from '../model/types.js';
import type {
  ActivationRanges,
  BatchNormLayer,
  DenseLayer,
  Layer,
  ModelDoc,
  ModelMeta,
  Normalisation,
  Provenance,
  StorageCodec,
  TargetScaling,
} from '../model/types.js';
import {
  type RawBatchNorm,
  type RawDense,
  type RawLayer,
  type RawMinMax,
  type RawModel,
  type RawActivationRanges,
  type RawTargetScaling,
  type RawZScore,
} from './payload.js';
import { decodeTensor, formatShape, type DecodedTensor } from './tensor.js';

/** The width flowing into the next layer and where it came from, for messages. */
interface Width {
  value: number | null;
  from: string;
}

function checkDense(raw: RawDense, where: string, width: Width, problems: Problem[]): DenseLayer | null {
  const before = problems.length;
  const sizeOk = Number.isInteger(raw.size) && raw.size >= 1;
  if (!sizeOk) problems.push({ where: `${where}.size`, message: `size must be at least 1, got ${raw.size}` });

  const activation = activationByCode(raw.activation)?.name;
  if (activation === undefined) {
    const known = activationNames()
      .map((name) => `${activationKind(name).code} = ${name}`)
      .join(', ');
    problems.push({
      where: `${where}.activation`,
      message: raw.activation === 0 ? 'activation is not set' : `unknown activation code ${raw.activation} (known: ${known})`,
    });
  }
  if (!Number.isFinite(raw.alpha)) problems.push({ where: `${where}.alpha`, message: `alpha must be finite, got ${raw.alpha}` });

  const weight = decodeTensor(raw.weight, `${where}.weight`, problems);
  if (weight) {
    if (weight.shape.length !== 2) {
      problems.push({ where: `${where}.weight`, message: `must be 2-D [inputs, size], got shape ${formatShape(weight.shape)}` });
    } else {
      if (sizeOk && weight.shape[1] !== raw.size) {
        problems.push({ where: `${where}.weight`, message: `shape ${formatShape(weight.shape)} has ${weight.shape[1]} columns, but size is ${raw.size}` });
      }
      if (width.value !== null && weight.shape[0] !== width.value) {
        problems.push({
          where: `${where}.weight`,
          message: `shape ${formatShape(weight.shape)} takes ${weight.shape[0]} inputs, but ${width.from} gives width ${width.value}`,
        });
      }
    }
  }
  const bias = decodeTensor(raw.bias, `${where}.bias`, problems);
  if (bias && sizeOk && (bias.shape.length !== 1 || bias.shape[0] !== raw.size)) {
    problems.push({ where: `${where}.bias`, message: `shape ${formatShape(bias.shape)}, expected [${raw.size}] (size)` });
  }

  // Keep checking later layers against the width this one declares, even if it is broken.
  width.value = sizeOk ? raw.size : weight && weight.shape.length === 2 ? weight.shape[1] : null;
  width.from = `${where.replace(/\.dense$/, '')} (dense)`;
  if (problems.length > before || !weight || !bias || activation === undefined) return null;
  return { kind: 'dense', size: raw.size, activation, alpha: raw.alpha, weight: weight.data, bias: bias.data };
}

const BATCHNORM_VECTORS = ['gamma', 'beta', 'running_mean', 'running_variance'] as const;

function checkBatchNorm(raw: RawBatchNorm, where: string, width: Width, problems: Problem[]): BatchNormLayer | null {
  const before = problems.length;
  const vectors: Partial<Record<(typeof BATCHNORM_VECTORS)[number], DecodedTensor>> = {};
  for (const name of BATCHNORM_VECTORS) {
    const tensor = decodeTensor(raw[name], `${where}.${name}`, problems);
    if (tensor === null) continue;
    if (tensor.shape.length !== 1) {
      problems.push({ where: `${where}.${name}`, message: `must be 1-D, got shape ${formatShape(tensor.shape)}` });
      continue;
    }
    vectors[name] = tensor;
  }
  const lengths = BATCHNORM_VECTORS.filter((n) => vectors[n]).map((n) => [n, vectors[n]!.shape[0]] as const);
  if (new Set(lengths.map(([, len]) => len)).size > 1) {
    problems.push({ where, message: `vectors have unequal lengths: ${lengths.map(([n, len]) => `${n} ${len}`).join(', ')}` });
  } else if (lengths.length > 0 && width.value !== null && lengths[0][1] !== width.value) {
    problems.push({ where, message: `vectors have length ${lengths[0][1]}, but ${width.from} gives width ${width.value}` });
  }
  const variance = vectors.running_variance;
  if (variance) {
    const negative = variance.data.findIndex((v) => v < 0);
    if (negative >= 0) {
      const count = variance.data.reduce((n, v) => n + (v < 0 ? 1 : 0), 0);
      problems.push({
        where: `${where}.running_variance`,
        message: `${count} negative value${count === 1 ? '' : 's'} (first at element ${negative}: ${variance.data[negative]})`,
      });
    }
  }
  for (const name of ['epsilon', 'momentum'] as const) {
    if (!BATCHNORM_RULES[name].ok(raw[name]))
      problems.push({ where: `${where}.${name}`, message: `${name} must be ${BATCHNORM_RULES[name].rule}, got ${raw[name]}` });
  }
  if (width.value === null && lengths.length > 0) width.value = lengths[0][1];
  width.from = `${where.replace(/\.batchnorm$/, '')} (batchnorm)`;
  const { gamma, beta, running_mean, running_variance } = vectors;
  if (problems.length > before || !gamma || !beta || !running_mean || !running_variance) return null;
  return {
    kind: 'batchnorm',
    gamma: gamma.data,
    beta: beta.data,
    runningMean: running_mean.data,
    runningVariance: running_variance.data,
    epsilon: raw.epsilon,
    momentum: raw.momentum,
  };
}

function checkLayer(raw: RawLayer, index: number, width: Width, problems: Problem[], codecs: StorageCodec[]): Layer | null {
  const where = `layers[${index}]`;
  switch (raw.kind) {
    case 'dense': {
      const layer = raw.dense ? checkDense(raw.dense, `${where}.dense`, width, problems) : null;
      const dtype = raw.dense?.weight?.dtype;
      if (dtype === 2) codecs.push('f16');
      else if (dtype === 3) codecs.push('i8');
      else codecs.push('f32');
      return layer;
    }
    case 'batchnorm':
      return raw.batchnorm ? checkBatchNorm(raw.batchnorm, `${where}.batchnorm`, width, problems) : null;
    case 'dropout': {
      const rate = raw.dropout?.rate ?? 0;
      if (!DROPOUT_RATE_RULE.ok(rate)) {
        problems.push({ where: `${where}.dropout.rate`, message: `rate must be ${DROPOUT_RATE_RULE.rule}, got ${rate}` });
        return null;
      }
      return { kind: 'dropout', rate };
    }
    case undefined:
      problems.push({ where, message: `no layer kind is set (expected ${LAYER_KINDS.join(', ')})` });
      return null;
    default:
      // Every kind has a case above: a new one fails to compile here until it does.
      throw new Error(`checkLayer: unhandled layer kind ${String(raw.kind satisfies never)}`);
  }
}

function checkStats(
  arrays: Record<string, number[]>,
  rules: Record<string, { ok: (v: number) => boolean; rule: string }>,
  count: number,
  where: string,
  inputs: number,
  problems: Problem[],
): Record<string, Float64Array> | null {
  const names = Object.keys(arrays);
  if (names.every((n) => arrays[n].length === 0)) return null;
  for (const name of names) {
    const values = arrays[name];
    if (values.length !== inputs) {
      problems.push({ where: `${where}.${name}`, message: `has ${values.length} values, expected ${inputs} (one per input)` });
      continue;
    }
    const bad = values.findIndex((v) => !rules[name].ok(v));
    if (bad >= 0) {
      problems.push({ where: `${where}.${name}`, message: `values must be ${rules[name].rule} (element ${bad} is ${values[bad]})` });
    }
  }
  if (!Number.isSafeInteger(count) || count < 0) {
    problems.push({ where: `${where}.count`, message: `count must be a whole number of rows, got ${count}` });
  }
  return Object.fromEntries(names.map((n) => [n, Float64Array.from(arrays[n])]));
}

const FINITE = { ok: (v: number) => Number.isFinite(v), rule: 'finite' };

function checkZScore(raw: RawZScore, inputs: number, problems: Problem[]): Normalisation {
  const stats = checkStats(
    { mean: raw.mean, std: raw.std, m2: raw.m2 },
    {
      mean: FINITE,
      // 0 marks a feature that was constant when fitted: it maps to 0 and contributes nothing.
      std: { ok: (v) => Number.isFinite(v) && v >= 0, rule: 'finite and >= 0' },
      m2: { ok: (v) => Number.isFinite(v) && v >= 0, rule: 'finite and >= 0' },
    },
    raw.count,
    'zscore',
    inputs,
    problems,
  );
  return { method: 'zscore', mean: stats?.mean ?? null, std: stats?.std ?? null, m2: stats?.m2 ?? null, count: raw.count };
}

function checkMinMax(raw: RawMinMax, inputs: number, problems: Problem[]): Normalisation {
  const stats = checkStats({ min: raw.min, max: raw.max }, { min: FINITE, max: FINITE }, raw.count, 'minmax', inputs, problems);
  if (stats && stats.min.length === inputs && stats.max.length === inputs) {
    const inverted = stats.min.findIndex((lo, i) => lo > stats.max[i]);
    if (inverted >= 0) {
      problems.push({ where: 'minmax', message: `min exceeds max at input ${inverted} (${stats.min[inverted]} > ${stats.max[inverted]})` });
    }
  }
  return { method: 'minmax', min: stats?.min ?? null, max: stats?.max ?? null, count: raw.count };
}

/** Target scaling: one finite mean and one std > 0 per output; the layer rule is the model's (model/target-scaling.ts). */
function checkTargetScaling(raw: RawTargetScaling, outputs: number | null, problems: Problem[]): TargetScaling | null {
  const before = problems.length;
  for (const [name, values] of [
    ['mean', raw.mean],
    ['std', raw.std],
  ] as const) {
    if (outputs !== null && values.length !== outputs) {
      problems.push({ where: `target_scaling.${name}`, message: `has ${values.length} values, expected one per output (${outputs})` });
    }
  }
  const badMean = raw.mean.findIndex((v) => !Number.isFinite(v));
  if (badMean >= 0) problems.push({ where: 'target_scaling.mean', message: `values must be finite (element ${badMean} is ${raw.mean[badMean]})` });
  const badStd = raw.std.findIndex((v) => !(Number.isFinite(v) && v > 0));
  if (badStd >= 0) problems.push({ where: 'target_scaling.std', message: `values must be finite and > 0 (element ${badStd} is ${raw.std[badStd]})` });
  if (problems.length > before) return null;
  return { mean: Float64Array.from(raw.mean), std: Float64Array.from(raw.std) };
}

/**
 * Stored int8 activation ranges: one finite pair per dense layer, min <= max; the rule is the
 * model's (model/activation-ranges.ts), so a file and a document in memory are held to one rule.
 * Layers that failed their own checks are counted by the kind the file declares.
 */
function checkActivationRanges(raw: RawActivationRanges, layers: (Layer | null)[], problems: Problem[]): ActivationRanges | null {
  const ranges: ActivationRanges = { min: Float64Array.from(raw.min), max: Float64Array.from(raw.max), rows: raw.rows };
  if (layers.some((l) => l === null)) return null;
  const found = activationRangeProblems({ layers: layers as Layer[], activationRanges: ranges });
  problems.push(...found);
  return found.length > 0 ? null : ranges;
}

/**
 * Turn a decoded payload into a ModelDoc. Returns the document only when no problem was found;
 * `problems` lists every problem.
 */
export function checkPayload(raw: RawModel): { doc: ModelDoc | null; problems: Problem[] } {
  const problems: Problem[] = [];
  const inputsOk = Number.isInteger(raw.inputs) && raw.inputs >= 1;
  if (!inputsOk) problems.push({ where: 'inputs', message: `inputs must be at least 1, got ${raw.inputs}` });

  if (raw.feature_names.length > 0 && inputsOk && raw.feature_names.length !== raw.inputs) {
    problems.push({ where: 'feature_names', message: `${raw.feature_names.length} names for ${raw.inputs} inputs` });
  }

  let normalise: Normalisation | null = null;
  if (raw.input_scaling === 'zscore' && raw.zscore) normalise = checkZScore(raw.zscore, raw.inputs, problems);
  else if (raw.input_scaling === 'minmax' && raw.minmax) normalise = checkMinMax(raw.minmax, raw.inputs, problems);

  if (raw.layers.length === 0) problems.push({ where: 'layers', message: 'a model needs at least one layer' });
  const width: Width = { value: inputsOk ? raw.inputs : null, from: 'inputs' };
  const codecs: StorageCodec[] = [];
  const layers = raw.layers.map((layer, i) => checkLayer(layer, i, width, problems, codecs));

  if (raw.output_labels.length > 0 && width.value !== null && raw.output_labels.length !== width.value) {
    problems.push({ where: 'output_labels', message: `${raw.output_labels.length} labels for ${width.value} outputs (${width.from})` });
  }

  const targetScaling = raw.target_scaling ? checkTargetScaling(raw.target_scaling, width.value, problems) : null;
  const activationRanges = raw.activation_ranges ? checkActivationRanges(raw.activation_ranges, layers, problems) : null;

  const provenance: Provenance[] = raw.lineage.map((step, i) => {
    if (!/^[0-9a-f]{8}$/.test(step.checksum)) {
      problems.push({ where: `lineage[${i}].checksum`, message: `expected 8 lowercase hex digits, got "${step.checksum}"` });
    }
    return { checksum: step.checksum, source: step.source, action: step.action, at: step.at };
  });

  const info = raw.info;
  const meta: ModelMeta = {
    name: info?.name ?? '',
    description: info?.description ?? '',
    created: info?.created ?? '',
    extra: { ...(info?.extra ?? {}) },
  };

  // 0 is proto3's "absent": a file before 1.1, or a model without a temperature.
  const temperature = raw.temperature ?? 0;
  if (temperature !== 0 && !(Number.isFinite(temperature) && temperature > 0)) {
    problems.push({ where: 'temperature', message: `must be a finite number > 0 (or absent), got ${temperature}` });
  }

  if (problems.length > 0) return { doc: null, problems };
  return {
    doc: {
      inputs: raw.inputs,
      features: raw.feature_names.length > 0 ? [...raw.feature_names] : null,
      labels: raw.output_labels.length > 0 ? [...raw.output_labels] : null,
      normalise,
      ...(targetScaling ? { targetScaling } : {}),
      layers: layers.filter((l): l is Layer => l !== null),
      meta,
      provenance,
      // The storage a file was written with is that of its dense weights (all share one).
      storage: codecs[0] ?? 'f32',
      ...(temperature !== 0 ? { temperature } : {}),
      ...(activationRanges ? { activationRanges } : {}),
    },
    problems,
  };
}
