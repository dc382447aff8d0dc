/**
 * The score route's own parts: the micro-batcher wired to the model slot (each batch runs on
 * one leased model and carries that model's generation back as an extra column), the facts of
 * recent generations, and the JSON answer built from a batch's output.
 */
import type { TendonModel } from '../tendon.js';
import { MicroBatcher, type BatcherOptions } from './batcher.js';
import type { ModelSlot } from './swap.js';

/** Runs one batch on a model; the default is the model's own engine session. */
export type ModelBatchRunner = (model: TendonModel, x: Float32Array, rows: number) => Promise<Float32Array> | Float32Array;

/** What an answer says about the model that scored it. */
export interface Generation {
  readonly checksum: string | null;
  readonly labels: readonly string[] | null;
}

/** How many past models' facts are kept to label answers of batches that ran on them. */
export const GENERATIONS_KEPT = 64;

/**
 * A batcher whose batches each run on the slot's current model, leased for the batch so a swap
 * waits for it, with the model's generation appended to every output row.
 */
export function slotBatcher(slot: ModelSlot, runBatch: ModelBatchRunner, options: BatcherOptions): MicroBatcher {
  return new MicroBatcher(async (x, rows) => {
    const lease = slot.acquire();
    try {
      const y = await runBatch(lease.model, x, rows);
      return withGeneration(y, rows, lease.generation);
    } finally {
      slot.release(lease);
    }
  }, options);
}

/** Append the generation that ran the batch as one more column, so each answer names its model. */
function withGeneration(y: Float32Array, rows: number, generation: number): Float32Array {
  const width = y.length / rows;
  const out = new Float32Array(rows * (width + 1));
  for (let r = 0; r < rows; r++) {
    out.set(y.subarray(r * width, (r + 1) * width), r * (width + 1));
    out[r * (width + 1) + width] = generation;
  }
  return out;
}

/**
 * The outputs of a batcher answer without the generation column, and that generation.
 * @example splitGeneration(Float32Array.of(0.2, 0.8, 1), 1) // { generation: 1, width: 2, outputs: Float32Array [0.2, 0.8] }
 */
export function splitGeneration(y: Float32Array, rows: number): { generation: number; width: number; outputs: Float32Array } {
  const width = y.length / rows - 1;
  const outputs = new Float32Array(rows * width);
  for (let r = 0; r < rows; r++) outputs.set(y.subarray(r * (width + 1), r * (width + 1) + width), r * width);
  return { generation: y[width]!, width, outputs };
}

/** Output names for a CSV answer: the model's labels, else output_0, output_1, ... */
export function outputNames(labels: readonly string[] | null, width: number): readonly string[] {
  return labels && labels.length === width ? labels : Array.from({ length: width }, (_, i) => `output_${i}`);
}

function argmax(row: readonly number[]): number {
  let best = 0;
  for (let j = 1; j < row.length; j++) if (row[j] > row[best]) best = j;
  return best;
}

/**
 * The answer to a score request from the batcher's output for its rows: outputs per row, the
 * top index (more than one output) and labels when the scoring model had them, and the
 * generation that ran it.
 *
 * @example scoreAnswer(Float32Array.of(0.2, 0.8, 1), 1, generations) // { generation: 1, body: { model, outputs: [[0.2, 0.8]], top: [1] } }
 */
export function scoreAnswer(
  y: Float32Array,
  rows: number,
  generations: ReadonlyMap<number, Generation>,
): { generation: number; body: Record<string, unknown> } {
  const width = y.length / rows - 1;
  const generation = y[width];
  const facts = generations.get(generation) ?? { checksum: null, labels: null };
  const outputs: number[][] = [];
  for (let r = 0; r < rows; r++) outputs.push(Array.from(y.subarray(r * (width + 1), r * (width + 1) + width)));
  const top = width > 1 ? outputs.map(argmax) : null;
  const body: Record<string, unknown> = { model: facts.checksum, outputs };
  if (top) body.top = top;
  const labels = facts.labels;
  if (labels) {
    body.labels = labels;
    if (top) body.topLabel = top.map((i) => labels[i]);
  }
  return { generation, body };
}

/**
 * `JSON.stringify(scoreAnswer(y, rows, generations).body) + '\n'`, the same text character for
 * character, written straight from the float32 outputs: no array per row and no generic
 * serialiser walking them. A number is spelled as JSON.stringify spells it (`String` of the
 * double; null when not finite).
 * @example scoreAnswerText(Float32Array.of(0.25, 0.75, 1), 1, generations) // '{"model":"1a2b3c4d","outputs":[[0.25,0.75]],"top":[1]}\n'
 */
export function scoreAnswerText(y: Float32Array, rows: number, generations: ReadonlyMap<number, Generation>): string {
  const stride = y.length / rows;
  const width = stride - 1;
  const facts = generations.get(y[width]!) ?? { checksum: null, labels: null };
  const top = width > 1 ? new Array<number>(rows) : null;
  let text = `{"model":${JSON.stringify(facts.checksum)},"outputs":[`;
  for (let r = 0; r < rows; r++) {
    const at = r * stride;
    let best = 0;
    text += r === 0 ? '[' : ',[';
    for (let j = 0; j < width; j++) {
      const v = y[at + j]!;
      text += (j === 0 ? '' : ',') + (v - v === 0 ? String(v) : 'null');
      if (v > y[at + best]!) best = j;
    }
    text += ']';
    if (top) top[r] = best;
  }
  text += ']';
  if (top) text += `,"top":[${top.join(',')}]`;
  const labels = facts.labels;
  if (labels) {
    text += `,"labels":${JSON.stringify(labels)}`;
    if (top) text += `,"topLabel":${JSON.stringify(top.map((i) => labels[i]))}`;
  }
  return text + '}\n';
}
