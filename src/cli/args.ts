/**
 * A small argument parser: each command declares its flags, and anything undeclared,
 * missing or malformed becomes a UsageError naming the flag.
 */
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
  [K in keyof S]: S[K]['kind'] extends 'boolean'
    ? boolean
    : S[K]['kind'] extends 'string'
      ? string | undefined
      : number | undefined;
};

export interface Parsed<S extends FlagSpecs> {
  readonly flags: FlagValues<S>;
  readonly positionals: string[];
}

/**
 * Parse `argv` (without the command word) against `specs`.
 * @example parseArgs(['m.tdn', '--batch', '64'], { batch: { kind: 'integer', help: '' } })
 * @throws UsageError for an unknown flag, a missing value or a value of the wrong kind.
 */
export function parseArgs<S extends FlagSpecs>(argv: readonly string[], specs: S): Parsed<S> {
  const values: Record<string, string | number | boolean | undefined> = {};
  for (const [name, spec] of Object.entries(specs)) {
    values[name] = spec.default ?? (spec.kind === 'boolean' ? false : undefined);
  }
  const byShort = new Map(
    Object.entries(specs)
      .filter(([, s]) => s.short)
      .map(([name, s]) => [s.short as string, name]),
  );
  const positionals: string[] = [];
  for (let i = 0; i < argv.length; i++) {
    const arg = argv[i];
    if (arg === '--') {
      positionals.push(...argv.slice(i + 1));
      break;
    }
    if (!arg.startsWith('-') || arg === '-' || /^-\d/.test(arg)) {
      positionals.push(arg);
      continue;
    }
    const eq = arg.indexOf('=');
    const rawName = eq >= 0 ? arg.slice(0, eq) : arg;
    const name = rawName.startsWith('--') ? rawName.slice(2) : byShort.get(rawName.slice(1));
    if (!name || !(name in specs)) {
      const known = Object.keys(specs)
        .map((k) => `--${k}`)
        .join(', ');
      throw new UsageError(rawName, `unknown option (known: ${known || 'none'})`);
    }
    const spec = specs[name];
    if (spec.kind === 'boolean') {
      if (eq >= 0) throw new UsageError(rawName, 'takes no value');
      values[name] = true;
      continue;
    }
    let raw: string | undefined;
    if (eq >= 0) raw = arg.slice(eq + 1);
    else {
      raw = argv[i + 1];
      i++;
    }
    if (raw === undefined) throw new UsageError(rawName, 'needs a value');
    values[name] = convert(rawName, spec.kind, raw);
  }
  return { flags: values as FlagValues<S>, positionals };
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
