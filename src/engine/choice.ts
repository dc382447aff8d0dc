/**
 * Which engine runs a model. Three engines give the same numbers within float32 tolerance:
 * - 'js':   the tfjs CPU backend, plain JavaScript; always there; the reference for engine parity.
 * - 'wasm': the tfjs WebAssembly backend's SIMD kernels.
 * - 'fast': tendon's own WebAssembly SIMD dense kernel, without tfjs's per-op overhead.
 * A fourth runs integer arithmetic and is held to the int8 tolerance instead:
 * - 'int8': int8 weights times per-row quantised activations (int8/), for i8-stored models.
 * 'auto' picks int8 for a model stored as i8 (whose weights are int8 codes already), else fast,
 * then wasm, then js, and says why. A float32 or float16 model is never quantised by 'auto'.
 */
import { EngineUnavailableError } from '../errors.js';
import { engineFallbackReason, useEngine, type EngineName } from './backend.js';
import { relaxedMaddAvailable, wasmSimdAvailable } from './fast/dense-kernel.js';
import { bestInt8Arith, INT8_KERNEL_NAMES } from './int8/kernels.js';
import type { ModelDoc } from '../model/index.js';

export const ENGINE_CHOICES = ['auto', 'fast', 'wasm', 'js', 'int8'] as const;
export type EngineChoice = (typeof ENGINE_CHOICES)[number];
export type RuntimeEngine = EngineName | 'fast' | 'int8';

export interface ResolvedEngine {
  readonly engine: RuntimeEngine;
  /** One line on why 'auto' did not get its first choice; null when it did. */
  readonly fallback: string | null;
  /** One line on a choice 'auto' made from the model itself (int8 for an i8-stored model); null otherwise. */
  readonly note?: string | null;
}

/**
 * Settle which engine runs inference. For 'fast' the tfjs backend is left as it is (tfjs is
 * still used for training and tensor input); for 'js' and 'wasm' the process's tfjs backend is
 * switched.
 * `doc`, when given, lets 'auto' pick the int8 engine for a model stored as i8.
 * @throws Error when 'fast', 'wasm' or 'int8' is asked for explicitly and cannot start here.
 */
export async function resolveEngine(choice: EngineChoice, doc?: ModelDoc): Promise<ResolvedEngine> {
  if (choice === 'int8') {
    if (bestInt8Arith() === null) throw new Error('the int8 engine needs WebAssembly SIMD, which this runtime lacks');
    return { engine: 'int8', fallback: null };
  }
  if (choice === 'auto' && doc?.storage === 'i8') {
    const arith = bestInt8Arith();
    if (arith !== null) return { engine: 'int8', fallback: null, note: `auto: the int8 engine (${INT8_KERNEL_NAMES[arith]}) for a model stored as i8` };
  }
  if (choice === 'fast' || choice === 'auto') {
    if (wasmSimdAvailable()) return { engine: 'fast', fallback: null };
    if (choice === 'fast') throw new EngineUnavailableError('fast', 'it needs WebAssembly SIMD, which this runtime lacks');
    const engine = await useEngine('auto');
    const why = engineFallbackReason();
    return { engine, fallback: `WebAssembly SIMD unavailable for the fast engine; using ${engine}${why ? ` (${why})` : ''}` };
  }
  return { engine: await useEngine(choice), fallback: null };
}

/**
 * Which kernel an engine runs here, in words (what `about`, `check` and `bench` print).
 * @example kernelDescription('int8') // "relaxed i8 dot, i16x8.relaxed_dot_i8x16_i7x16_s"
 */
export function kernelDescription(engine: RuntimeEngine): string {
  if (engine === 'int8') {
    const arith = bestInt8Arith();
    return arith === null ? 'none (no WebAssembly SIMD)' : INT8_KERNEL_NAMES[arith];
  }
  if (engine === 'fast') return relaxedMaddAvailable() ? 'float32 SIMD (f32x4.relaxed_madd)' : 'float32 SIMD (f32x4.mul + f32x4.add)';
  return `tfjs ${engine} backend`;
}
