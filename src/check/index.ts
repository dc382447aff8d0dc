export { compareMatrices, topClassAgreement, type Discrepancy } from './compare.js';
export { assertParity, parityReport, randomInputs, type LayerParity, type OutputParity, type ParityOptions, type ParityReport } from './parity.js';
export {
  FLOAT32_TOLERANCE,
  INT8_LIPSCHITZ,
  INT8_SIGMAS,
  int8Allowed,
  int8RoundingVariance,
  REL_FLOOR,
  relativeError,
  toleranceRatio,
  withinTolerance,
  type Tolerance,
} from './tolerance.js';
export { int8ParityReport } from './int8-parity.js';
