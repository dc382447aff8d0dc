export { compareMatrices, topClassAgreement, type Discrepancy } from './compare.js';
export { assertParity, parityReport, randomInputs, type LayerParity, type OutputParity, type ParityOptions, type ParityReport } from './parity.js';
export { FLOAT32_TOLERANCE, REL_FLOOR, relativeError, toleranceRatio, withinTolerance, type Tolerance } from './tolerance.js';
