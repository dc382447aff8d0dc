/**
 * The argument layer over Node's `util.parseArgs`: each command declares typed flags, and
 * anything undeclared, missing or malformed becomes a UsageError naming the flag.
 */
import { parseArgs as nodeParseArgs } from 'node:util';
import { UsageError } from '../errors.js';

export type FlagKind = 'string' | 'number' | 'integer' | 'boolean';

export interface FlagSpec {
  readonly kind: FlagKind;
  /** One-letter alias, e.g. "o" for --out. */
  readonly short?: string;
  readonly help: string;
  readonly default?: string | number | boolean;
}

export type FlagSpecs = Record<string, FlagSpec>;

export type FlagValues<S extends FlagSpecs> = {
  [K in keyof S]: S[K]['kind'] extends 'boolean' ? boolean : S[K]['kind'] extends 'string' ? string | undefined : number | undefined;
};

export interface Parsed<S extends FlagSpecs> {
  readonly flags: FlagValues<S>;
  readonly positionals: string[];
}

/**
 * Parse `argv` (without the command word) against `specs`. Node's own `util.parseArgs` splits
 * the words into options and positionals; this layer gives each flag its declared type and
 * turns anything undeclared, missing or malformed into a UsageError naming the flag.
 * @example parseArgs(['m.tdn', '--batch', '64'], { batch: { kind: 'integer', help: '' } })
 * @throws UsageError for an unknown flag, a missing value or a value of the wrong kind.
 */
export function parseArgs<S extends FlagSpecs>(argv: readonly string[], specs: S): Parsed<S> {
  const values: Record<string, string | number | boolean | undefined> = {};
  for (const [name, spec] of Object.entries(specs)) {
    values[name] = spec.default ?? (spec.kind === 'boolean' ? false : undefined);
  }
  const positionals: string[] = [];
  const negativeAt = new Set<number>();
  for (const token of splitWords(argv, specs)) {
    if (token.kind === 'positional') {
      positionals.push(token.value);
      continue;
    }
    if (token.kind !== 'option') continue;
    // A word like "-3" is a negative number, not a cluster of one-letter flags.
    if (/^-\d/.test(argv[token.index])) {
      if (!negativeAt.has(token.index)) positionals.push(argv[token.index]);
      negativeAt.add(token.index);
      continue;
    }
    values[token.name] = flagValue(token, specs);
  }
  return { flags: values as FlagValues<S>, positionals };
}

type OptionToken = Extract<ReturnType<typeof splitWords>[number], { kind: 'option' }>;

/** Node's tokenizer, told only which flags take a value; it never throws (strict off). */
function splitWords(argv: readonly string[], specs: FlagSpecs) {
  const options: Record<string, { type: 'string' | 'boolean'; short?: string }> = {};
  for (const [name, spec] of Object.entries(specs)) {
    options[name] = { type: spec.kind === 'boolean' ? 'boolean' : 'string', ...(spec.short ? { short: spec.short } : {}) };
  }
  return nodeParseArgs({ args: [...argv], options, strict: false, allowPositionals: true, tokens: true }).tokens;
}

function flagValue(token: OptionToken, specs: FlagSpecs): string | number | boolean {
  const spec = Object.hasOwn(specs, token.name) ? specs[token.name] : undefined;
  if (!spec) {
    const known = Object.keys(specs)
      .map((k) => `--${k}`)
      .join(', ');
    throw new UsageError(token.rawName, `unknown option (known: ${known || 'none'})`);
  }
  if (spec.kind === 'boolean') {
    if (token.value !== undefined) throw new UsageError(token.rawName, 'takes no value');
    return true;
  }
  if (token.value === undefined) throw new UsageError(token.rawName, 'needs a value');
  // Node reads "-o=x" as the value "=x"; we have always read it as "x", like "--out=x".
  const raw = token.inlineValue && !token.rawName.startsWith('--') ? token.value.replace(/^=/, '') : token.value;
  return convert(token.rawName, spec.kind, raw);
}

function convert(flag: string, kind: FlagKind, raw: string): string | number {
  if (kind === 'string') return raw;
  const n = raw.trim() === '' ? NaN : Number(raw);
  if (!Number.isFinite(n)) throw new UsageError(flag, `expected a number, got "${raw}"`);
  if (kind === 'integer' && !Number.isInteger(n)) {
    throw new UsageError(flag, `expected a whole number, got "${raw}"`);
  }
  return n;
}

/** The one positional a command needs, or a UsageError that says what is missing. */
export function requirePositional(positionals: readonly string[], index: number, what: string): string {
  const value = positionals[index];
  if (value === undefined) throw new UsageError('', `missing ${what}`);
  return value;
}

/** A flag the command cannot go without. */
export function requireFlag<T>(value: T | undefined, flag: string): T {
  if (value === undefined || value === '') throw new UsageError(`--${flag}`, 'is required');
  return value;
}

/** Refuse more positionals than the command takes. */
export function noExtraPositionals(positionals: readonly string[], count: number): void {
  if (positionals.length > count) {
    throw new UsageError('', `unexpected argument "${positionals[count]}"`);
  }
}

/** Help text for a command's flags, one per line. */
export function describeFlags(specs: FlagSpecs): string {
  return Object.entries(specs)
    .map(([name, s]) => {
      const left = `  ${s.short ? `-${s.short}, ` : '    '}--${name}${s.kind === 'boolean' ? '' : ' <' + s.kind + '>'}`;
      return `${left.padEnd(30)} ${s.help}${s.default !== undefined && s.kind !== 'boolean' ? ` (default ${s.default})` : ''}`;
    })
    .join('\n');
}
