/** On-device training: the tune loop and its parts. Re-exports only. */
export {
  tune,
  gradientsOf,
  cloneDoc,
  TuneDivergence,
  type TuneResult,
  type TuneRunOptions,
  type TuneHooks,
  type EpochRecord,
  type BatchProgress,
  type SplitMetrics,
} from './tune.js';
export { resolveTuneOptions, type TuneOptions, type TuneData, type ResolvedTuneOptions } from './config.js';
export { makeBackend, type TrainBackend, type TrainPath } from './backends.js';
export { computeLoss, lossFor, softmaxRows, targetMatrix, LOSS_NAMES, PROBABILITY_CLAMP, type LossName, type LossSpec, type Targets } from './losses.js';
export {
  makeOptimiser,
  ADAM_DEFAULTS,
  OPTIMISER_NAMES,
  type Optimiser,
  type OptimiserSpec,
  type OptimiserName,
  type WeightDecay,
  type ParamSlot,
} from './optimisers.js';
export { rateAt, type Schedule, type ScheduleShape } from './schedule.js';
export { clipGlobalNorm, globalNorm } from './clip.js';
export { combineMoments, updateNormalisation, isUnfitted, copyNormalisation, type NormalisationPolicy } from './normalisation.js';
export { accuracy, argmaxRows, confusionMatrix, meanAbsoluteError, predictedClasses, rootMeanSquaredError } from './metrics.js';
export { ReluActivity, linearStacks, rawInputs, vanishingGradient, type Diagnostic, type DiagnosticCode } from './diagnostics.js';
export { batchesPerEpoch, epochBatches, gatherRows, shuffledOrder, splitHoldout } from './shuffle.js';
export {
  CALIBRATION_CAUTION,
  ECE_BINS,
  classLogits,
  classProbabilities,
  expectedCalibrationError,
  fitTemperature,
  meanNll,
  scaledSoftmax,
  type TemperatureFit,
} from './calibration.js';
