/**
 * tfjs-core and its CPU backend, loaded on first use rather than at import. Loading tfjs-core
 * takes about 0.3 s (Node parses its CommonJS bundle to find the exports); a command that runs
 * the fast or int8 engine, or only reads a model file, never needs it. Code that runs tfjs ops
 * calls `tfjs()` where it runs them, and imports the types alone (`import type * as tf`).
 *
 * `require` resolves the same file as an `import` of the package does, so this is the one
 * tfjs-core instance of the process (the one the backends register with).
 */
import { createRequire } from 'node:module';
import type * as Tfjs from '@tensorflow/tfjs-core';

const requireHere = createRequire(import.meta.url);
let core: typeof Tfjs | null = null;
let cpuBackend = false;

/** tfjs-core, loaded on the first call. @example tfjs().relu(z) */
export function tfjs(): typeof Tfjs {
  core ??= requireHere('@tensorflow/tfjs-core') as typeof Tfjs;
  return core;
}

/** tfjs-core with the 'cpu' backend registered (the `js` engine), loaded on the first call. */
export function tfjsWithCpuBackend(): typeof Tfjs {
  const tf = tfjs();
  if (!cpuBackend) {
    requireHere('@tensorflow/tfjs-backend-cpu');
    cpuBackend = true;
  }
  return tf;
}
