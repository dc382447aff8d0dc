export { engineFallbackReason, ensureEngine, liveTensorCount, useEngine, type EngineName } from './backend.js';
export { openRunner, type Runner, type RunnerOptions } from './runner.js';
export { DEFAULT_CHUNK_ROWS, TfjsRunner, type TfjsRunnerOptions } from './tfjs-runner.js';
export { TfjsTrainer, type TfjsGradients, type TfjsTape, type TfjsTrainForward } from './tfjs-trainer.js';
export { ENGINE_CHOICES, resolveEngine, type EngineChoice, type ResolvedEngine, type RuntimeEngine } from './choice.js';
export { SimdRunner, type SimdRunnerOptions } from './fast/simd-runner.js';
export { SimdTrainer, simdTrainBlocker, type SimdTape, type SimdTrainForward } from './fast/simd-trainer.js';
export { wasmSimdAvailable } from './fast/dense-kernel.js';
