/**
 * Reports as pictures: tendon's look (look.ts), axes with round ticks (scale.ts), the charts
 * (line, horizontal bars, heat map), the HTML page, and the tune / check / bench / explain reports.
 * Pure functions: numbers in, markup out; nothing here imports tfjs or touches files.
 */
export * from './look.js';
export { contrastRatio, relativeLuminance, seenWith, deltaE, greyOf, type Dichromacy } from './colour.js';
export { niceStep, linearAxis, logAxis, tickText, valueText, type Axis } from './scale.js';
export {
  lineChart,
  barChart,
  heatMap,
  svgDocument,
  type LineChartSpec,
  type LineSeries,
  type BarChartSpec,
  type BarGroup,
  type HeatMapSpec,
} from './charts.js';
export { htmlPage, htmlTable, findingsList, para, type PageSpec, type PageSection, type Finding } from './page.js';
export {
  tuneCurvesSvg,
  tunePage,
  classScores,
  curveFindings,
  diagnosticFinding,
  type TuneReportInput,
  type TuneEpochView,
  type TuneDiagnosticView,
} from './tune.js';
export { checkPage, type CheckReportInput, type ParityRowView } from './check.js';
export { benchPage, type BenchReportInput, type BenchMeasure } from './bench.js';
export { explainPage, EXPLAIN_TOP_FEATURES, type ExplainReportInput } from './explain.js';
