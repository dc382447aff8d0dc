/**
 * The places a training step can run: our own WebAssembly SIMD kernel ('fast', float32; dense
 * and dropout layers only), the tfjs engine ('engine', float32, every layer kind) and the
 * float64 reference path (exact, slower; used by tests and by `gradientsOf`). All read the
 * working document's arrays: after an optimiser step the fast and engine paths copy in the
 * layers that changed, the reference path reads them directly.
 *
 * All hand back the last layer's pre-activation (the logits) when the loss wants it, so
 * softmax + cross-entropy gets the stable `p - t` gradient straight into the last dense layer.
 */
import { SimdTrainer, TfjsTrainer, type SimdTape, type TfjsTape } from '../engine/index.js';
import { mat64, type BatchStats, type ForwardContext, type ModelDoc } from '../model/index.js';
import { referenceBackwardTape, referenceForward, referenceForwardTrain, toMat64, type ReferenceTapeEntry } from '../reference/index.js';

export const TRAIN_PATHS = ['fast', 'engine', 'reference'] as const;
export type TrainPath = (typeof TRAIN_PATHS)[number];

export interface TrainForward {
  readonly rows: number;
  /** The loss input: last layer's pre-activation (logits) or its outputs, rows x outputs. */
  readonly out: Float32Array | Float64Array;
  /** Per layer: batchnorm batch statistics, null elsewhere. */
  readonly stats: readonly (BatchStats | null)[];
  readonly tape: TfjsTape | SimdTape | readonly ReferenceTapeEntry[];
}

export interface TrainBackend {
  readonly path: TrainPath;
  forwardTrain(x: Float32Array | Float64Array, rows: number, ctx: ForwardContext): TrainForward;
  /** Per layer, one gradient per trainable tensor; frees the forward's tape. */
  backward(f: TrainForward, dOut: Float64Array): (Float32Array | Float64Array)[][];
  /** Free a forward's tape without backward. */
  discard(f: TrainForward): void;
  /** The document's arrays of these layers changed (or the normalisation, when omitted). */
  refresh(layers?: Iterable<number>): void;
  /** Inference outputs of every layer; the last is the loss input (logits or outputs). */
  evaluate(x: Float32Array | Float64Array, rows: number): (Float32Array | Float64Array)[];
  dispose(): void;
}

/**
 * The document as evaluation sees it: the same layer objects, except that a final dense layer
 * reports its pre-activation when the loss reads logits.
 */
function logitsView(doc: ModelDoc, preActivation: boolean): ModelDoc {
  if (!preActivation) return doc;
  const last = doc.layers.length - 1;
  return { ...doc, layers: doc.layers.map((l, i) => (i === last && l.kind === 'dense' ? { ...l, activation: 'linear' as const } : l)) };
}

/** Rows per evaluation piece on the reference path, to bound the float64 copies. */
const REFERENCE_EVAL_ROWS = 1024;

/**
 * A backend over `doc` (which the caller updates in place). `preActivation`: the loss reads
 * the last dense layer's logits.
 *
 * @example const b = makeBackend('fast', work, true); const f = b.forwardTrain(x, rows, ctx);
 * @throws RangeError for 'fast' when the model has a layer it cannot train (see simdTrainBlocker).
 */
export function makeBackend(path: TrainPath, doc: ModelDoc, preActivation: boolean): TrainBackend {
  const view = logitsView(doc, preActivation);
  if (path === 'reference') return referenceBackend(doc, view, preActivation);
  if (path === 'fast') return fastBackend(doc, preActivation);
  return engineBackend(doc, view, preActivation);
}

/** Steps on the float64 reference path; evaluation runs in pieces of REFERENCE_EVAL_ROWS rows. */
function referenceBackend(doc: ModelDoc, view: ModelDoc, preActivation: boolean): TrainBackend {
  const outputs = (): number => {
    let w = doc.inputs;
    for (const l of doc.layers) if (l.kind === 'dense') w = l.size;
    return w;
  };
  return {
    path: 'reference',
    forwardTrain(x, rows, ctx) {
      const r = referenceForwardTrain(doc, toMat64(x, rows, doc.inputs), ctx);
      const out = preActivation ? r.z!.data : r.y.data;
      return { rows, out, stats: r.tape.map((t) => t.stats ?? null), tape: r.tape };
    },
    backward(f, dOut) {
      const tape = f.tape as readonly ReferenceTapeEntry[];
      return referenceBackwardTape(doc, tape, mat64(f.rows, outputs(), dOut), { dyIsPreActivation: preActivation }).grads;
    },
    discard() {},
    refresh() {},
    evaluate(x, rows) {
      const pieces: Float64Array[][] = [];
      for (let start = 0; start < rows; start += REFERENCE_EVAL_ROWS) {
        const n = Math.min(REFERENCE_EVAL_ROWS, rows - start);
        const sub = x.subarray(start * doc.inputs, (start + n) * doc.inputs);
        pieces.push(referenceForward(view, toMat64(sub, n, doc.inputs), { keepLayers: true }).layers!.map((m) => m.data));
      }
      if (pieces.length === 1) return pieces[0];
      return pieces[0].map((_, layer) => {
        const total = pieces.reduce((s, p) => s + p[layer].length, 0);
        const joined = new Float64Array(total);
        let at = 0;
        for (const p of pieces) {
          joined.set(p[layer], at);
          at += p[layer].length;
        }
        return joined;
      });
    },
    dispose() {},
  };
}

/** Steps on our WebAssembly SIMD kernel. */
function fastBackend(doc: ModelDoc, preActivation: boolean): TrainBackend {
  const fast = new SimdTrainer(doc, { preActivation });
  return {
    path: 'fast',
    forwardTrain(x, rows, ctx) {
      return fast.forwardTrain(x, rows, ctx);
    },
    backward(f, dOut) {
      return fast.backward({ rows: f.rows, out: f.out as Float32Array, stats: [], tape: f.tape as SimdTape }, dOut);
    },
    discard(f) {
      (f.tape as SimdTape).disposed = true;
    },
    refresh(layers) {
      fast.refresh(layers);
    },
    evaluate(x, rows) {
      return fast.evaluate(x, rows);
    },
    dispose() {},
  };
}

/** Steps on the tfjs engine; evaluation reads logits from a second session when the loss wants them. */
function engineBackend(doc: ModelDoc, view: ModelDoc, preActivation: boolean): TrainBackend {
  const session = new TfjsTrainer(doc);
  const evalSession = preActivation ? new TfjsTrainer(view) : session;
  let evalStale = false;
  return {
    path: 'engine',
    forwardTrain(x, rows, ctx) {
      const f = session.forwardTrain(x instanceof Float32Array ? x : Float32Array.from(x), rows, ctx);
      const out = preActivation ? f.z : f.y;
      if (!out) {
        session.disposeTape(f.tape);
        throw new Error('forwardTrain gave no pre-activation: the last layer is not dense');
      }
      return { rows, out, stats: f.stats, tape: f.tape };
    },
    backward(f, dOut) {
      return session.backward(f.tape as TfjsTape, Float32Array.from(dOut), { dyIsPreActivation: preActivation }).grads;
    },
    discard(f) {
      session.disposeTape(f.tape as TfjsTape);
    },
    refresh(layers) {
      if (layers === undefined) session.refreshWeights();
      else for (const i of layers) session.refreshWeights(i);
      if (evalSession !== session) evalStale = true;
    },
    evaluate(x, rows) {
      if (evalStale) {
        evalSession.refreshWeights();
        evalStale = false;
      }
      return evalSession.runLayers(x instanceof Float32Array ? x : Float32Array.from(x), rows);
    },
    dispose() {
      session.dispose();
      if (evalSession !== session) evalSession.dispose();
    },
  };
}
