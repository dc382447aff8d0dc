/**
 * What a layer kind stores, declared once in the kind's own file: each field's name in the
 * document, in formats/tendon.proto and in a JSON spec, whether it is a tensor (and its shape in
 * terms of the incoming width and the layer's counts) or a number, its rule and its default.
 * The codec, the file check, the spec behind `tendon pack` and validation loop over these
 * declarations; none of them names a kind.
 */
import type { Problem } from '../../errors.js';
import { activationKind, activationNames, isActivationName } from '../activations/catalogue.js';
import type { ActivationName } from '../types.js';
import { finiteProblems } from './checks.js';

/** The keys of L whose values are of type T. */
type KeysOf<L, T> = { [K in keyof L]-?: L[K] extends T ? K : never }[keyof L] & string;

/** An attribute rule: the one home of it, read by validation, the file check and the spec. */
export interface ValueRule {
  readonly ok: (v: number) => boolean;
  /** What `ok` asks, in words that follow "must be": "in [0, 1)". */
  readonly rule: string;
}

/** A dimension of a stored tensor: the incoming width ('in'), or the value of one of the layer's count fields. */
export type Dim<L> = 'in' | KeysOf<L, number>;

interface Names<K extends string> {
  /** The property of the layer document. */
  readonly key: K;
  /** The field of the kind's message in formats/tendon.proto. */
  readonly proto: string;
  /** The field of a layer in a JSON spec (`tendon pack`). */
  readonly spec: string;
}

/** A stored float32 tensor. */
interface TensorFieldOf<K extends string, D extends string> extends Names<K> {
  readonly type: 'tensor';
  readonly shape: readonly D[];
  /** 'model': written in the document's storage codec (f32, f16 or i8); 'f32': always at full precision. */
  readonly storage: 'model' | 'f32';
  /** A spec that leaves it out: every value this number, or 'drawn' (the kind's `fillEmpty`, from the seed). */
  readonly start: number | 'drawn';
  /** A rule every value must follow (beyond being finite). */
  readonly each?: ValueRule;
}

/** A whole number >= 1 that tensor shapes and the output width may name; a spec must give it. */
interface CountFieldOf<K extends string> extends Names<K> {
  readonly type: 'count';
}

/** A number with a rule and the default a spec falls back on. */
interface NumberFieldOf<K extends string> extends Names<K> {
  readonly type: 'number';
  readonly rule: ValueRule;
  readonly default: number;
}

/** An activation from the catalogue, stored as its file code. */
interface ActivationFieldOf<K extends string> extends Names<K> {
  readonly type: 'activation';
  readonly default: ActivationName;
}

/** One stored field of a layer of type L, its keys checked against L. */
export type LayerField<L> =
  | TensorFieldOf<KeysOf<L, Float32Array>, Dim<L>>
  | CountFieldOf<KeysOf<L, number>>
  | NumberFieldOf<KeysOf<L, number>>
  | ActivationFieldOf<KeysOf<L, ActivationName>>;

/** A kind's stored form: its fields in the order they are checked, and its output width. */
export interface StoredForm<L> {
  /** The output width: the incoming width ('in'), or the value of one of its count fields. */
  readonly output: Dim<L>;
  readonly fields: readonly LayerField<L>[];
}

/** A field as the codec, the file check and the spec read it: keys as plain strings. */
export type AnyField = TensorFieldOf<string, string> | CountFieldOf<string> | NumberFieldOf<string> | ActivationFieldOf<string>;

export interface AnyStoredForm {
  readonly output: string;
  readonly fields: readonly AnyField[];
}

/** A layer document as the generic readers and writers see it. */
export type FieldValues = Record<string, unknown>;

/** The shape of a tensor field for a layer, or null when a count it names is not a whole number >= 1. */
export function fieldShape(field: { readonly shape: readonly string[] }, values: FieldValues, inputWidth: number): number[] | null {
  const dims = field.shape.map((dim) => (dim === 'in' ? inputWidth : values[dim]));
  return dims.every((d): d is number => typeof d === 'number' && Number.isInteger(d) && d >= 0) ? dims : null;
}

/** "[inputs, size]": a shape rule in words, for messages. */
export function shapeInWords(field: { readonly shape: readonly string[] }): string {
  return `[${field.shape.map((dim) => (dim === 'in' ? 'inputs' : dim)).join(', ')}]`;
}

/** The output width of a layer by its stored form. */
export function widthAfter(form: AnyStoredForm, values: FieldValues, inputWidth: number): number {
  return form.output === 'in' ? inputWidth : (values[form.output] as number);
}

/** Whether a value is a whole number >= 1 (what a count field holds). */
export function isCount(v: unknown): v is number {
  return typeof v === 'number' && Number.isInteger(v) && v >= 1;
}

/** The rule of every count field, in the words the readers use. */
export const COUNT_RULE: ValueRule = { ok: isCount, rule: 'a whole number > 0' };

/**
 * Problems with a layer's stored fields, by its declarations: counts, numbers by their rules,
 * a known activation, and every tensor of the declared size, finite and within its rule.
 * `where` is e.g. "layers[2] (batchnorm)".
 */
export function storedFieldProblems(form: AnyStoredForm, doc: object, inputWidth: number, where: string): Problem[] {
  // One typed adapter: a layer document read field by field, by the names its kind declares.
  const layer = doc as FieldValues;
  const problems: Problem[] = [];
  const counts = form.fields.filter((f) => f.type === 'count');
  for (const f of counts) {
    if (!isCount(layer[f.key])) problems.push({ where, message: `${f.key} must be ${COUNT_RULE.rule}, got ${String(layer[f.key])}` });
  }
  if (problems.length > 0) return problems;
  for (const f of form.fields) {
    const value = layer[f.key];
    if (f.type === 'number' && !(typeof value === 'number' && f.rule.ok(value))) {
      problems.push({ where, message: `${f.key} must be ${f.rule.rule}, got ${String(value)}` });
    } else if (f.type === 'activation' && !isActivationName(value)) {
      problems.push({ where, message: `unknown activation "${String(value)}" (expected one of ${activationNames().join(', ')})` });
    } else if (f.type === 'tensor') {
      const data = value as Float32Array;
      const shape = fieldShape(f, layer, inputWidth) ?? [];
      const want = shape.reduce((a, b) => a * b, 1);
      if (data.length !== want) {
        const total = shape.length > 1 ? ` = ${want}` : '';
        problems.push({ where, message: `${f.key} has ${data.length} values, expected [${shape.join(', ')}]${total}` });
        continue;
      }
      const nonFinite = finiteProblems(data, f.key, where);
      problems.push(...nonFinite);
      const bad = f.each && nonFinite.length === 0 ? data.findIndex((v) => !f.each!.ok(v)) : -1;
      if (bad >= 0) problems.push({ where, message: `${f.key}[${bad}] is ${data[bad]}; every value must be ${f.each!.rule}` });
    }
  }
  return problems;
}

/** An activation's file code, or undefined for a name the catalogue does not hold. */
export function activationCode(name: unknown): number | undefined {
  return isActivationName(name) ? activationKind(name).code : undefined;
}
