export { matMul64, matMulTransA64, matMulTransB64 } from './matmul.js';
export { normalise64, normaliseBackward64 } from './normalise.js';
export { referenceBackwardTape, referenceForward, referenceForwardTrain, toMat64, type ReferenceTapeEntry } from './forward.js';
export { referenceLogits } from './logits.js';
export { inputGradient } from './input-gradient.js';
