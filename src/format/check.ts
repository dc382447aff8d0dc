/**
 * Payload objects -> ModelDoc, checking everything on the way and collecting every problem.
 * Problems name the payload field they are about, e.g. "layers[1].dense.weight".
 *
 * Each layer is read by its kind's declared fields (src/model/layers/<kind>.ts, `stored`): no
 * kind is named here. The running width is tracked through the layers (a kind's output count,
 * or unchanged) so each layer's incoming width is checked here too.
 */
import type { Problem } from '../errors.js';
import {
  COUNT_RULE,
  activationByCode,
  activationKind,
  activationNames,
  activationRangeProblems,
  isCount,
  isLayerKindName,
  layerKindNames,
  shapeInWords,
  storedForm,
  type AnyField,
  type AnyStoredForm,
  type FieldValues,
} from '../model/index.js';
import type { ActivationRanges, Layer, LayerKindName, ModelDoc, ModelMeta, Normalisation, Provenance, StorageCodec, TargetScaling } from '../model/types.js';
import {
  type RawActivationRanges,
  type RawField,
  type RawLayer,
  type RawMinMax,
  type RawModel,
  type RawTargetScaling,
  type RawTensor,
  type RawZScore,
} from './payload.js';
import { CODEC_OF_DTYPE, decodeTensor, formatShape } from './tensor.js';

/** The width flowing into the next layer and where it came from, for messages. */
interface Width {
  value: number | null;
  from: string;
}

type TensorField = AnyField & { type: 'tensor' };

/** Rank and the dimensions a count names; problems say which. Returns whether the rank is right (so the 'in' dimension can be read). */
function shapeAgrees(field: TensorField, shape: number[], values: FieldValues, where: string, problems: Problem[]): boolean {
  if (shape.length !== field.shape.length) {
    problems.push({ where, message: `must be ${field.shape.length}-D ${shapeInWords(field)}, got shape ${formatShape(shape)}` });
    return false;
  }
  field.shape.forEach((dim, d) => {
    const count = values[dim];
    if (dim === 'in' || typeof count !== 'number' || shape[d] === count) return;
    const message =
      shape.length === 1
        ? `shape ${formatShape(shape)}, expected [${count}] (${dim})`
        : `shape ${formatShape(shape)} has ${shape[d]} ${d === shape.length - 1 ? 'columns' : 'rows'}, but ${dim} is ${count}`;
    problems.push({ where, message });
  });
  return true;
}

/** A scalar field's value, or a problem naming the rule it breaks. */
function checkScalar(field: Exclude<AnyField, TensorField>, value: number, where: string, values: FieldValues, problems: Problem[]): void {
  if (field.type === 'activation') {
    const name = activationByCode(value)?.name;
    if (name !== undefined) values[field.key] = name;
    else {
      const known = activationNames()
        .map((n) => `${activationKind(n).code} = ${n}`)
        .join(', ');
      problems.push({ where, message: value === 0 ? 'activation is not set' : `unknown activation code ${value} (known: ${known})` });
    }
    return;
  }
  const rule = field.type === 'count' ? COUNT_RULE : field.rule;
  if (rule.ok(value)) values[field.key] = value;
  else problems.push({ where, message: `${field.proto} must be ${rule.rule}, got ${value}` });
}

/** A tensor that decoded with the declared rank. */
interface Decoded {
  readonly field: TensorField;
  readonly shape: number[];
}

/**
 * One layer's message by its kind's declared fields, in their order; then the incoming width
 * its tensors take against the width arriving, and the width it passes on (`width`, updated even
 * when the layer is broken, so later layers are still checked).
 */
function checkFields(kind: LayerKindName, raw: Record<string, RawField>, where: string, width: Width, problems: Problem[]): Layer | null {
  const before = problems.length;
  const form = storedForm(kind);
  const values: FieldValues = { kind };
  // Counts first: tensor shapes name them whatever the order of the fields.
  for (const field of form.fields) if (field.type === 'count' && isCount(raw[field.proto])) values[field.key] = raw[field.proto];
  const decoded: Decoded[] = [];
  for (const field of form.fields) {
    const at = `${where}.${field.proto}`;
    if (field.type !== 'tensor') {
      checkScalar(field, raw[field.proto] as number, at, values, problems);
      continue;
    }
    const tensor = decodeTensor(raw[field.proto] as RawTensor | null, at, problems);
    if (tensor === null || !shapeAgrees(field, tensor.shape, values, at, problems)) continue;
    const rule = field.each;
    const bad = rule ? tensor.data.findIndex((v) => !rule.ok(v)) : -1;
    if (rule && bad >= 0) {
      const count = tensor.data.reduce((n, v) => n + (rule.ok(v) ? 0 : 1), 0);
      problems.push({ where: at, message: `${count} value${count === 1 ? '' : 's'} not ${rule.rule} (first at element ${bad}: ${tensor.data[bad]})` });
    }
    values[field.key] = tensor.data;
    decoded.push({ field, shape: tensor.shape });
  }
  const inputs = decoded.flatMap(({ field, shape }) =>
    field.shape.includes('in') ? [{ proto: field.proto, shape, width: shape[field.shape.indexOf('in')] }] : [],
  );
  checkIncomingWidth(inputs, where, width, problems);
  passWidthOn(form, values, decoded, where, kind, width);
  return problems.length > before ? null : (values as unknown as Layer);
}

/** The incoming width every tensor takes: one width between them, and the one arriving. */
function checkIncomingWidth(inputs: { proto: string; shape: number[]; width: number }[], where: string, width: Width, problems: Problem[]): void {
  if (new Set(inputs.map((t) => t.width)).size > 1) {
    problems.push({ where, message: `tensors have unequal lengths along the input width: ${inputs.map((t) => `${t.proto} ${t.width}`).join(', ')}` });
  } else if (inputs.length > 0 && width.value !== null && inputs[0].width !== width.value) {
    const [one] = inputs;
    if (inputs.length === 1) {
      problems.push({
        where: `${where}.${one.proto}`,
        message: `shape ${formatShape(one.shape)} takes ${one.width} inputs, but ${width.from} gives width ${width.value}`,
      });
    } else {
      problems.push({ where, message: `tensors take ${one.width} inputs, but ${width.from} gives width ${width.value}` });
    }
  }
}

/** The width after the layer: its count (else the tensor dimension that count names), or the incoming width. */
function passWidthOn(form: AnyStoredForm, values: FieldValues, decoded: Decoded[], where: string, kind: string, width: Width): void {
  const output = form.output;
  const carrier = decoded.find((t) => t.field.shape.includes(output));
  if (output !== 'in') {
    const counted = values[output];
    width.value = typeof counted === 'number' ? counted : carrier ? carrier.shape[carrier.field.shape.indexOf(output)] : null;
  } else if (width.value === null && carrier) {
    width.value = carrier.shape[carrier.field.shape.indexOf('in')];
  }
  // A layer whose fields carry a width (a count it passes on, or tensors over the incoming width) is where the next width comes from.
  if (output !== 'in' || form.fields.some((f) => f.type === 'tensor' && f.shape.includes('in'))) width.from = `${where.replace(/\.[a-z_]+$/, '')} (${kind})`;
}

function checkLayer(raw: RawLayer, index: number, width: Width, problems: Problem[], codecs: StorageCodec[]): Layer | null {
  const where = `layers[${index}]`;
  const kind: string | undefined = raw.kind;
  if (kind === undefined) {
    problems.push({ where, message: `no layer kind is set (expected ${layerKindNames().join(', ')})` });
    return null;
  }
  if (!isLayerKindName(kind)) {
    problems.push({ where, message: `unknown layer kind "${kind}" (expected ${layerKindNames().join(', ')})` });
    width.value = null;
    return null;
  }
  // One typed adapter: the member of the oneof the kind names, read by its declared field names.
  const params = (raw as Record<string, unknown>)[kind] as Record<string, RawField> | null | undefined;
  // The storage a file was written with is that of the tensors stored in the model's codec (all share one).
  const stored = storedForm(kind).fields.find((f) => f.type === 'tensor' && f.storage === 'model');
  if (stored) codecs.push(CODEC_OF_DTYPE.get((params?.[stored.proto] as RawTensor | null | undefined)?.dtype ?? 0) ?? 'f32');
  return params ? checkFields(kind, params, `${where}.${kind}`, width, problems) : null;
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
      // The storage a file was written with is that of its tensors stored in the model's codec (all share one).
      storage: codecs[0] ?? 'f32',
      ...(temperature !== 0 ? { temperature } : {}),
      ...(activationRanges ? { activationRanges } : {}),
    },
    problems,
  };
}
