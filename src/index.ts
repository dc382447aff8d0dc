/**
 * tendon's public API. Re-exports only: each piece lives in its own module.
 */
import { tfjsWithCpuBackend } from './model/tfjs-lazy.js';

// The one side effect: importing the library makes tfjs usable at once (its 'cpu' backend
// registered), as callers passing tensors expect. The CLI does not import this file: it loads
// tfjs only when a tfjs engine runs.
tfjsWithCpuBackend();

export { openModel, modelFromDocument, engineFallback, engineNote, TendonModel, type OpenOptions } from './tendon.js';
export * from './errors.js';
export * from './model/types.js';
export { validateModel, modelWidths, outputWidth, SeededRng, withTemperatureFolded } from './model/index.js';
export { encodeModel, decodeModel, readModelFile, writeModelFile, crc32 } from './format/index.js';
export {
  openRunner,
  TfjsRunner,
  TfjsTrainer,
  SimdRunner,
  SimdTrainer,
  useEngine,
  resolveEngine,
  engineFallbackReason,
  wasmSimdAvailable,
  liveTensorCount,
  ENGINE_CHOICES,
  type Runner,
  type RunnerOptions,
  type EngineName,
  type EngineChoice,
  type RuntimeEngine,
} from './engine/index.js';
export { referenceForward, inputGradient } from './reference/index.js';
export { explainRows, integratedGradients, completenessGaps, topFeatures, type Explanation, type Attribution, type ClassChoice } from './explain/index.js';
export { fitTemperature, expectedCalibrationError, ECE_BINS, type TemperatureFit } from './train/calibration.js';
export { parityReport, randomInputs, FLOAT32_TOLERANCE, type ParityReport, type Tolerance } from './check/index.js';
export { buildFromSpec, type SpecOptions } from './spec/spec.js';
export { openTable, readTable, openTableWriter, readNpy, writeNpy, readIdx } from './io/index.js';
export { tune, type TuneResult, type EpochRecord, type TuneRunOptions } from './train/tune.js';
export {
  foldModel,
  shrinkModel,
  storageCost,
  compareOutputs,
  compareWithParent,
  recordActivationRanges,
  withActivationRanges,
  baselineNormalisation,
  SHRINK_TOLERANCE,
  type FoldResult,
  type FoldStep,
  type StorageChoice,
  type OutputComparison,
} from './transform/index.js';
export { DriftMonitor, FeatureMoments, describeDrift, type DriftReport, type FeatureDrift } from './drift/index.js';
export {
  createRequestHandler,
  startServer,
  ROUTES,
  bearerToken,
  type Authorize,
  type RequestHandlerOptions,
  type TendonRequestHandler,
  type RunningServer,
  type ServerOptions,
  type ModelBatchRunner,
} from './serve/http.js';
export { ModelSlot, type SwapOutcome } from './serve/swap.js';
export { ServiceCounters } from './serve/metrics.js';
export { MicroBatcher, BusyError, type BatcherOptions } from './serve/batcher.js';
export { WorkerPool, type PoolOptions } from './serve/pool.js';
export * from './bench/index.js';
