import { ENGINE_CHOICES, type EngineChoice } from '../../engine/index.js';
import { UsageError } from '../../errors.js';

/** The --engine flag: auto (int8 for an i8-stored model, else fast, else wasm, else js), fast (own SIMD kernel), int8 (integer kernel), wasm (tfjs SIMD) or js (tfjs CPU). */
export function parseEngine(value: string | undefined): EngineChoice {
  const v = value ?? 'auto';
  if (!(ENGINE_CHOICES as readonly string[]).includes(v)) throw new UsageError('--engine', `must be one of ${ENGINE_CHOICES.join(', ')}, got "${v}"`);
  return v as EngineChoice;
}

export const ENGINE_HELP = 'auto, fast, int8, wasm or js';

/** The --engine flag as the running commands declare it (score, check, bench, demo). */
export const ENGINE_FLAG = { kind: 'string', help: ENGINE_HELP, default: 'auto' } as const;
