export * from './types.js';
export type { ActivationKind } from './activations/kind.js';
export { activationKind } from './activations/catalogue.js';
export type {
  BackwardOptions,
  BatchStats,
  EngineBackward,
  EngineForward,
  ForwardContext,
  LayerKind,
  Mat64,
  RefBackward,
  RefForward,
  Rng,
} from './layers/kind.js';
export { isLayerKindName, layerKind } from './layers/catalogue.js';
export { batchNormAffine } from './layers/batchnorm.js';
export { mat64, matMul64 } from './layers/mat64.js';
export { SeededRng, fisherYates } from './rng.js';
export { DEFAULT_LEAKY_ALPHA, initDense } from './init.js';
export { modelProblems, modelWidths, outputWidth, validateModel } from './validate.js';
export { modelFacts, type ModelFacts } from './facts.js';
export { inputAffine, inputShiftScale, type InputAffine } from './input-affine.js';
