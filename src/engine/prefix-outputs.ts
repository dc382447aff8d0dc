/**
 * Per-layer outputs for the parity report, for engines that run a model only whole: layer i's
 * output is the output of the model cut after layer i, opened on the same engine.
 */
import { modelCutAfter, type ModelDoc } from '../model/index.js';

/**
 * @example outputsOfPrefixes(doc, () => runner.run(x, n), (prefix) => new SimdRunner(prefix), x, n)
 */
export function outputsOfPrefixes(
  doc: ModelDoc,
  whole: () => Float32Array,
  open: (prefix: ModelDoc) => { run(data: Float32Array, rows: number): Float32Array; dispose(): void },
  data: Float32Array,
  rows: number,
): Float32Array[] {
  return doc.layers.map((_, i) => {
    if (i === doc.layers.length - 1) return whole();
    const cut = open(modelCutAfter(doc, i));
    try {
      return cut.run(data, rows);
    } finally {
      cut.dispose();
    }
  });
}
