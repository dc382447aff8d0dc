export * from './types.js';
export type { ActivationF32, ActivationKind } from './activations/kind.js';
export { activationByCode, activationKind, activationNames, isActivationName, registerActivation } from './activations/catalogue.js';
export { pointwiseF32 } from './activations/f32.js';
export type {
  BackwardOptions,
  BatchStats,
  EngineBackward,
  EngineForward,
  ForwardContext,
  LayerKind,
  SimdInference,
  SimdPart,
  SimdTraining,
  Mat64,
  RefBackward,
  RefForward,
  Rng,
} from './layers/kind.js';
export { isLayerKindName, layerKind } from './layers/catalogue.js';
export { BATCHNORM_RULES, batchNormAffine } from './layers/batchnorm.js';
export { DROPOUT_RATE_RULE } from './layers/dropout.js';
export { mat64, matMul64 } from './layers/mat64.js';
export { SeededRng, fisherYates } from './rng.js';
export { DEFAULT_LEAKY_ALPHA, initDense } from './init.js';
export { modelProblems, modelWidths, outputWidth, validateModel } from './validate.js';
export { modelFacts, outputsAreClasses, type ModelFacts } from './facts.js';
export { inputAffine, inputShiftScale, type InputAffine } from './input-affine.js';
export { canCalibrate, outputDenseIndex, temperatureOf, temperatureProblems, withTemperatureFolded } from './temperature.js';
export { attachTargetScaling, fitTargetScaling, foldTargetScaling, scalableOutputLayer, targetScalingProblems } from './target-scaling.js';
export { runningForm } from './running-form.js';
export { activationRangeProblems, denseLayerIndices, rangesOfPrefix } from './activation-ranges.js';
