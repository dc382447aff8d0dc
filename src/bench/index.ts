/** Benchmarks: the measuring loop and benchModel for a user's model, and the fixed suite. */
export { benchBaselines, type BaselineRow } from './baselines.js';
export {
  benchModel,
  formatBenchRows,
  gflops,
  percentile,
  timeCalls,
  type BenchModelOptions,
  type BenchRow,
  type Timing,
  type TimingOptions,
} from './measure.js';
export { denseStackDoc, multiplyAddsPerRow, seededRows } from './models.js';
export {
  formatSuite,
  resultsMarkdownRows,
  runBenchSuite,
  RESULTS_HEADER,
  type SuiteOptions,
  type SuiteResult,
  type SuiteRow,
  type TargetCheck,
} from './suite.js';
