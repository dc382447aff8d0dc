/** Pure document transforms: folding for inference and compact storage. */
export { foldModel, baselineNormalisation, FOLDED_NORMALISATION_KEY, type FoldResult, type FoldStep, type FoldStepName, type FoldOptions } from './fold.js';
export { shrinkModel, storageCost, denseWeightBytes, describeStorageCosts, costVerdict, type StorageChoice, type ShrinkOptions } from './shrink.js';
export { compareOutputs, compareWithParent, type OutputComparison } from './compare.js';
export { SHRINK_TOLERANCE } from './tolerance.js';
export { RangeRecorder, recordActivationRanges, withActivationRanges } from './calibrate.js';
