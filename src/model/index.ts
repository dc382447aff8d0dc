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
  AnyLayer,
  LayerKind,
  SimdInference,
  SimdPart,
  SimdTraining,
  Mat64,
  RefBackward,
  RefForward,
  Rng,
} from './layers/kind.js';
export {
  isLayerKindName,
  layerKind,
  layerKindNames,
  layerOutputWidth,
  registerLayerKind,
  storedForm,
  type BuiltInStoredForms,
  type LayerCatalogue,
} from './layers/catalogue.js';
export { COUNT_RULE, activationCode, fieldShape, isCount, shapeInWords, storedFieldProblems, widthAfter } from './layers/fields.js';
export type { AnyField, AnyStoredForm, FieldValues, LayerField, StoredForm, ValueRule } from './layers/fields.js';
export { batchNormAffine } from './layers/batchnorm.js';
export { mat64, matMul64 } from './layers/mat64.js';
export { SeededRng, fisherYates } from './rng.js';
export { DEFAULT_LEAKY_ALPHA, initDense } from './init.js';
export { modelProblems, modelWidths, outputWidth, validateModel } from './validate.js';
export { modelFacts, outputsAreClasses, type ModelFacts } from './facts.js';
export { inputAffine, inputShiftScale, type InputAffine } from './input-affine.js';
export { canCalibrate, outputDenseIndex, temperatureOf, temperatureProblems, withTemperatureFolded } from './temperature.js';
export { attachTargetScaling, fitTargetScaling, foldTargetScaling, scalableOutputLayer, targetScalingProblems } from './target-scaling.js';
export { runningForm } from './running-form.js';
export { activationRangeProblems, denseLayerIndices, modelCutAfter } from './activation-ranges.js';
