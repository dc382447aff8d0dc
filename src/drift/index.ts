/** Drift of incoming features against the model's stored normalisation statistics. */
export { FeatureMoments } from '../model/moments.js';
export { DriftMonitor, describeDrift, DEFAULT_DRIFT_K, ZSCORE_RANGE_SD, type DriftReport, type FeatureDrift } from './monitor.js';
