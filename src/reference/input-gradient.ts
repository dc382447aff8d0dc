/**
 * The gradient of one model output with respect to the RAW input features, in float64: the
 * layers' own reference backward halves run from a one-hot output gradient, then back through
 * the model's normalisation. This is what integrated gradients integrate.
 */
import { mat64, runningForm, type ForwardContext, type Mat64, type ModelDoc } from '../model/index.js';
import { referenceBackwardTape, referenceForwardTrain } from './forward.js';
import { normaliseBackward64 } from './normalise.js';

/** Inference mode with a tape: dropout is the identity, batch normalisation uses its running statistics. */
const INFERENCE_WITH_TAPE: ForwardContext = {
  training: false,
  dropoutMask: () => {
    throw new Error('dropout masks are not drawn at inference');
  },
};

/**
 * For each row r, y = the model's outputs (as it runs, calibration temperature included) and
 * dx[r] = d y[r, output[r]] / d x[r], the gradient of the chosen output with respect to the
 * raw features of that row. Rows are independent (no layer mixes rows at inference).
 * @example inputGradient(doc, mat64(1, 2, Float64Array.of(0.05, 0.1)), Int32Array.of(0)).dx
 */
export function inputGradient(doc: ModelDoc, x: Mat64, output: Int32Array): { y: Mat64; dx: Mat64 } {
  const running = runningForm(doc);
  const { y, tape } = referenceForwardTrain(running, x, INFERENCE_WITH_TAPE);
  const dy = mat64(y.rows, y.cols);
  for (let r = 0; r < y.rows; r++) dy.data[r * y.cols + output[r]] = 1;
  const { dx } = referenceBackwardTape(running, tape, dy);
  return { y, dx: normaliseBackward64(running.normalise, dx) };
}
