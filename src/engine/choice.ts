/**
 * Which engine runs a model. Three engines give the same numbers within float32 tolerance:
 * - 'js':   the tfjs CPU backend, plain JavaScript; always there; the reference for engine parity.
 * - 'wasm': the tfjs WebAssembly backend's SIMD kernels.
 * - 'fast': tendon's own WebAssembly SIMD dense kernel, without tfjs's per-op overhead.
 * 'auto' picks fast, then wasm, then js, and says why when it falls back.
 */
import { EngineUnavailableError } from '../errors.js';
import { engineFallbackReason, useEngine, type EngineName } from './backend.js';
import { wasmSimdAvailable } from './fast/dense-kernel.js';

export const ENGINE_CHOICES = ['auto', 'fast', 'wasm', 'js'] as const;
export type EngineChoice = (typeof ENGINE_CHOICES)[number];
export type RuntimeEngine = EngineName | 'fast';

export interface ResolvedEngine {
  readonly engine: RuntimeEngine;
  /** One line on why 'auto' did not get its first choice; null when it did. */
  readonly fallback: string | null;
}

/**
 * Settle which engine runs inference. For 'fast' the tfjs backend is left as it is (tfjs is
 * still used for training and tensor input); for 'js' and 'wasm' the process's tfjs backend is
 * switched.
 * @throws Error when 'fast' or 'wasm' is asked for explicitly and cannot start here.
 */
export async function resolveEngine(choice: EngineChoice): Promise<ResolvedEngine> {
  if (choice === 'fast' || choice === 'auto') {
    if (wasmSimdAvailable()) return { engine: 'fast', fallback: null };
    if (choice === 'fast') throw new EngineUnavailableError('fast', 'it needs WebAssembly SIMD, which this runtime lacks');
    const engine = await useEngine('auto');
    const why = engineFallbackReason();
    return { engine, fallback: `WebAssembly SIMD unavailable for the fast engine; using ${engine}${why ? ` (${why})` : ''}` };
  }
  return { engine: await useEngine(choice), fallback: null };
}
