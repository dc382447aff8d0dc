/** Per-feature attributions by integrated gradients. Re-exports only. */
export { completenessGaps, integratedGradients, type Attribution } from './integrated-gradients.js';
export {
  ATTRIBUTION_CAUTION,
  AUTO_STEPS_LIMIT,
  DEFAULT_STEPS,
  GAP_TOLERANCE,
  MAX_STEPS,
  checkBaselineRow,
  checkSteps,
  explainRows,
  namedBaseline,
  parseClassChoice,
  topFeatures,
  type ClassChoice,
  type Explanation,
} from './explain.js';
