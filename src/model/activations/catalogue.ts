/** The one list of activations. Adding one means a new file and a line here. */
import type { ActivationName } from '../types.js';
import type { ActivationKind } from './kind.js';
import { leakyRelu } from './leaky-relu.js';
import { linear } from './linear.js';
import { relu } from './relu.js';
import { sigmoid } from './sigmoid.js';
import { softmax } from './softmax.js';
import { softplus } from './softplus.js';
import { tanh } from './tanh.js';

// A record typed by every ActivationName: a missing entry is a compile error.
const BUILT_IN: Record<ActivationName, ActivationKind> = {
  linear,
  relu,
  leaky_relu: leakyRelu,
  sigmoid,
  tanh,
  softplus,
  softmax,
};

const CATALOGUE = new Map<string, ActivationKind>(Object.entries(BUILT_IN));

/**
 * The implementation of an activation.
 * @example activationKind('relu').refForward(Float64Array.of(-1, 2), 1, 2, 0) // [0, 2]
 */
export function activationKind(name: ActivationName): ActivationKind {
  const kind = CATALOGUE.get(name);
  if (!kind) throw new Error(`activationKind: no activation "${name}" in the catalogue`);
  return kind;
}

/** Whether a string names an activation in the catalogue (for specs and documents from outside). */
export function isActivationName(name: unknown): name is ActivationName {
  return typeof name === 'string' && CATALOGUE.has(name);
}

/** Every activation name in the catalogue, in registration order (for messages). */
export function activationNames(): ActivationName[] {
  return [...CATALOGUE.values()].map((k) => k.name);
}

/** The activation a file's enum code stands for, if any. */
export function activationByCode(code: number): ActivationKind | undefined {
  for (const kind of CATALOGUE.values()) if (kind.code === code) return kind;
  return undefined;
}

/**
 * Test hook: add an activation beyond the built-in ones for this process, to prove that the
 * catalogue alone carries an activation through every path. Returns the name, typed as an
 * activation name, and a function that removes it again.
 * @throws Error when the name or the file code is already taken.
 */
export function registerActivation(kind: Omit<ActivationKind, 'name'> & { readonly name: string }): { name: ActivationName; remove(): void } {
  if (CATALOGUE.has(kind.name)) throw new Error(`registerActivation: "${kind.name}" is already in the catalogue`);
  if (activationByCode(kind.code)) throw new Error(`registerActivation: file code ${kind.code} is already taken`);
  // The one widening: a registered name is an activation name for as long as it is registered.
  const entry = kind as ActivationKind;
  CATALOGUE.set(entry.name, entry);
  return { name: entry.name, remove: () => void CATALOGUE.delete(entry.name) };
}
