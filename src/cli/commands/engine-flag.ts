import { UsageError } from '../../errors.js';
import type { EngineName } from '../../engine/index.js';

const CHOICES = ['auto', 'js', 'wasm'] as const;

/** The --engine flag: js (tfjs CPU backend), wasm (SIMD kernels) or auto (wasm, else js). */
export function parseEngine(value: string | undefined): EngineName | 'auto' {
  const v = value ?? 'auto';
  if (!(CHOICES as readonly string[]).includes(v)) throw new UsageError('--engine', `must be one of ${CHOICES.join(', ')}, got "${v}"`);
  return v as EngineName | 'auto';
}
