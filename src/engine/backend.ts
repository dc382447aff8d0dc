/**
 * Engine choice. tfjs keeps ONE global backend per process: choosing an engine switches every
 * tensor op in this process, and tensors made under one backend must not be used under another.
 * Choose once at start-up, before any runner exists.
 *
 * - 'js':   @tensorflow/tfjs-backend-cpu, plain JavaScript kernels; always available.
 * - 'wasm': @tensorflow/tfjs-backend-wasm, loaded on demand; in Node it finds its .wasm binary in
 *           node_modules by itself.
 * - 'auto': wasm when it initialises, else js; `engineFallbackReason()` then says why.
 */
import { tfjs, tfjsWithCpuBackend } from '../model/tfjs-lazy.js';

export type EngineName = 'js' | 'wasm';

/** The tfjs backend name behind each engine. */
const TFJS_BACKEND: Record<EngineName, string> = { js: 'cpu', wasm: 'wasm' };

let prodModeSet = false;
let fallbackReason: string | null = null;

/**
 * Production mode skips tfjs's debug checks and silences its log/warn output, including the
 * banner suggesting the native Node binding.
 */
function enableProdModeOnce(): void {
  if (!prodModeSet) {
    // Every way into tfjs passes here first: load it, with the 'cpu' backend registered.
    tfjsWithCpuBackend().enableProdMode();
    prodModeSet = true;
  }
}

/**
 * Switch the process to an engine and wait until it is ready. Returns the engine in use.
 * @example const name = await useEngine('auto'); // 'wasm' or 'js'
 * @throws Error when 'wasm' is asked for explicitly and cannot start.
 */
export async function useEngine(name: EngineName | 'auto'): Promise<EngineName> {
  enableProdModeOnce();
  if (name === 'js') {
    await setTfBackend('js');
    return 'js';
  }
  try {
    await loadWasm();
    await setTfBackend('wasm');
    fallbackReason = null;
    return 'wasm';
  } catch (err) {
    if (name === 'wasm') throw err;
    fallbackReason = `wasm engine unavailable (${firstLine(err)}); using js`;
    await setTfBackend('js');
    return 'js';
  }
}

/** Why the last useEngine('auto') fell back to js, as one line; null when it did not. */
export function engineFallbackReason(): string | null {
  return fallbackReason;
}

/**
 * The engine tfjs runs on now. If none was chosen yet, settles on 'js' synchronously (the cpu
 * backend initialises without awaiting), so a session can be made without an explicit choice.
 */
export function ensureEngine(): EngineName {
  enableProdModeOnce();
  // backendName is null until a backend is chosen, though tfjs types it as string.
  const current: string | null = tfjs().engine().backendName;
  if (current === TFJS_BACKEND.wasm) return 'wasm';
  if (current !== TFJS_BACKEND.js) void tfjs().setBackend(TFJS_BACKEND.js);
  return 'js';
}

async function setTfBackend(name: EngineName): Promise<void> {
  const ok = await tfjs().setBackend(TFJS_BACKEND[name]);
  if (!ok) throw new Error(`tfjs backend '${TFJS_BACKEND[name]}' failed to initialise`);
  await tfjs().ready();
}

let wasmLoaded: Promise<unknown> | null = null;
function loadWasm(): Promise<unknown> {
  // Importing registers the backend; do it once per process.
  wasmLoaded ??= import('@tensorflow/tfjs-backend-wasm');
  return wasmLoaded;
}

function firstLine(err: unknown): string {
  const text = err instanceof Error ? err.message : String(err);
  return text.split('\n')[0];
}

/** tfjs tensors alive in this process: flat over time when nothing leaks. */
export function liveTensorCount(): number {
  // The fast and int8 engines never load tfjs: load it here (with its CPU backend) for the count.
  enableProdModeOnce();
  return tfjs().memory().numTensors;
}
