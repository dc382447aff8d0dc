/**
 * The document as engines and the float64 reference run it: stored facts that only rescale the
 * output layer (a calibration temperature, a regression target scaling) are folded into that
 * layer's weights and bias once, so no engine carries code for them. Training paths read the
 * document as stored, without this fold.
 */
import { foldTargetScaling } from './target-scaling.js';
import { withTemperatureFolded } from './temperature.js';
import type { ModelDoc } from './types.js';

/**
 * @example openRunner(runningForm(doc), engine) // what engine/runner.ts does
 */
export function runningForm(doc: ModelDoc): ModelDoc {
  return foldTargetScaling(withTemperatureFolded(doc));
}
