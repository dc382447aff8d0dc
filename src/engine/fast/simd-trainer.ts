/**
 * Training forward and backward on our own WebAssembly SIMD dense kernel, for dense stacks
 * (with dropout and input normalisation). Its shape follows the train loop's backend contract
 * (forwardTrain / backward / discard / refresh), so src/train can offer it as a third path.
 *
 * Every product runs on the same kernel, y = x·W + b, by choosing what plays x and W:
 * - forward:          z  = h · W + b
 * - weight gradient:  dW = hᵀ · dz       (x = hᵀ, a small transpose of the batch; W = dz)
 * - input gradient:   dhᵀ = W · dzᵀ      (x = W as stored, W = dzᵀ; then transpose back)
 * so no weight matrix is ever transposed, only batch-sized ones.
 *
 * Why: the tfjs wasm backend runs the transposed products of backward an order of magnitude
 * slower than its forward product (measured: 0.2-1.7 against 20+ GFLOP/s), which bounds
 * training at about 1-2 thousand rows/s for 784-256-10.
 */
import { EngineRefusal, ShapeError } from '../../errors.js';
import {
  activationKind,
  inputShiftScale,
  layerKind,
  modelWidths,
  validateModel,
  type ForwardContext,
  type ModelDoc,
  type SimdTraining,
} from '../../model/index.js';
import { instantiateDenseKernel, padded, type DenseKernel } from './dense-kernel.js';

/** Rows per piece in `evaluate`: bounds kernel memory on large hold-out sets. */
const EVAL_ROWS = 256;

/** A dense layer's arrays and attributes, read again after every optimiser step. */
type DenseParams = Extract<SimdTraining, { op: 'dense' }>['layer'];

interface DensePlan {
  readonly kind: 'dense';
  readonly index: number;
  readonly layer: DenseParams;
  /** Real input width and its width in kernel memory (padded except for the model input). */
  readonly inReal: number;
  readonly inP: number;
  readonly outP: number;
  /** Byte addresses of W [inP, outP] and b [outP]. */
  readonly w: number;
  readonly b: number;
}

interface DropoutPlan {
  readonly kind: 'dropout';
  readonly index: number;
  readonly rate: number;
  readonly width: number;
}

type Plan = DensePlan | DropoutPlan;

/** What backward needs from one forward. Arrays are compact (real widths), row-major. */
export interface SimdTape {
  readonly rows: number;
  /** Per layer: its input h. */
  readonly inputs: Float32Array[];
  /** Per dense layer: pre-activation z and output y (null for other kinds). */
  readonly z: (Float32Array | null)[];
  readonly y: (Float32Array | null)[];
  /** Per dropout layer: the mask used. */
  readonly masks: (Float32Array | null)[];
  disposed: boolean;
}

export interface SimdTrainForward {
  readonly rows: number;
  /** Logits (pre-activation of the last dense layer) when `preActivation`, else outputs. */
  readonly out: Float32Array;
  /** No batch statistics: batch normalisation is not supported here. */
  readonly stats: null[];
  readonly tape: SimdTape;
}

/**
 * Why this path cannot train `doc`, as one line naming the layer; null when it can.
 * @example simdTrainBlocker(docWithBatchnorm) // "layers[1] is batchnorm: fast training runs dense and dropout layers only"
 */
export function simdTrainBlocker(doc: ModelDoc): string | null {
  const plan = simdTrainingPlan(doc);
  if (!(plan instanceof EngineRefusal)) return null;
  const { layerIndex: i, kind, detail } = plan;
  return detail === LAST_NOT_DENSE ? `fast training needs a dense last layer; layers[${i}] is ${kind}` : `layers[${i}] is ${kind}: ${detail}`;
}

const LAST_NOT_DENSE = 'fast training needs a dense last layer';

/** Each layer's training form, from its own kind (the catalogue), or the refusal naming the layer. */
function simdTrainingPlan(doc: ModelDoc): SimdTraining[] | EngineRefusal {
  const steps: SimdTraining[] = [];
  for (const [i, layer] of doc.layers.entries()) {
    const part = layerKind(layer.kind).simd.training;
    if (typeof part !== 'function') return new EngineRefusal('fast', i, layer.kind, part.refused);
    steps.push(part(layer));
  }
  const last = steps.length - 1;
  if (last < 0 || steps[last].op !== 'dense') {
    const kind = doc.layers[last]?.kind ?? 'missing';
    return new EngineRefusal('fast', last, kind, LAST_NOT_DENSE);
  }
  return steps;
}

/**
 * @example
 * const t = new SimdTrainer(doc, { preActivation: true });
 * const f = t.forwardTrain(x, 64, ctx);
 * const grads = t.backward(f, dLogits); // per layer [dW, db]
 * // ...optimiser changes doc's arrays...
 * t.refresh();
 * @throws EngineRefusal when the model has a layer this path cannot train (batchnorm), naming it.
 */
export class SimdTrainer {
  readonly path = 'fast' as const;
  private readonly plan: Plan[];
  private readonly widths: readonly number[];
  private readonly preActivation: boolean;
  private kernel: DenseKernel | null = null;
  private capacityRows = 0;
  /** Scratch regions (byte addresses) sized for capacityRows. */
  private scratch = { a: 0, b: 0, out: 0, zeros: 0 };
  private norm: { shift: Float32Array; scale: Float32Array } | null;

  constructor(
    private readonly doc: ModelDoc,
    opts: { preActivation: boolean },
  ) {
    validateModel(doc, '(model)');
    this.preActivation = opts.preActivation;
    this.widths = modelWidths(doc);
    const steps = simdTrainingPlan(doc);
    if (steps instanceof EngineRefusal) throw steps;
    const plan: Plan[] = [];
    let inP = doc.inputs;
    steps.forEach((step, index) => {
      switch (step.op) {
        case 'dense': {
          const outP = padded(step.layer.size);
          plan.push({ kind: 'dense', index, layer: step.layer, inReal: this.widths[index], inP, outP, w: 0, b: 0 });
          inP = outP;
          break;
        }
        case 'mask':
          plan.push({ kind: 'dropout', index, rate: step.rate, width: this.widths[index] });
          break;
        default:
          throw new Error(`SimdTrainer: unknown kernel operation ${String(step satisfies never)}`);
      }
    });
    this.plan = plan;
    this.norm = inputShiftScale(doc.normalise, doc.inputs);
  }

  get inputs(): number {
    return this.widths[0];
  }

  get outputs(): number {
    return this.widths[this.widths.length - 1];
  }

  /** A training forward: dropout masks from ctx; the tape keeps what backward needs. */
  forwardTrain(x: Float32Array | Float64Array, rows: number, ctx: ForwardContext): SimdTrainForward {
    if (!(Number.isInteger(rows) && rows > 0) || x.length < rows * this.inputs) {
      throw new ShapeError('input', [`${rows} x ${this.inputs}`], [x.length], 'SimdTrainer.forwardTrain');
    }
    const { tape, out } = this.pass(x, rows, ctx);
    return { rows, out, stats: this.doc.layers.map(() => null), tape };
  }

  /**
   * Inference outputs of every layer (dropout passes rows through), in pieces of at most
   * EVAL_ROWS rows so kernel memory stays bounded. The last entry is the logits when
   * `preActivation`, else the model's outputs.
   * @example const layers = t.evaluate(x, 1000); // layers[i]: 1000 x width of layer i
   */
  evaluate(x: Float32Array | Float64Array, rows: number): Float32Array[] {
    if (!(Number.isInteger(rows) && rows >= 0) || x.length < rows * this.inputs) {
      throw new ShapeError('input', [`${rows} x ${this.inputs}`], [x.length], 'SimdTrainer.evaluate');
    }
    const outs = this.doc.layers.map((_, i) => new Float32Array(rows * this.widths[i + 1]));
    for (let start = 0; start < rows; start += EVAL_ROWS) {
      const n = Math.min(EVAL_ROWS, rows - start);
      const { tape } = this.pass(x.subarray(start * this.inputs, (start + n) * this.inputs), n, null);
      this.plan.forEach((p, pi) => {
        const width = this.widths[p.index + 1];
        const isLast = pi === this.plan.length - 1;
        const layerOut = p.kind === 'dropout' ? tape.inputs[pi] : isLast && this.preActivation ? tape.z[pi]! : tape.y[pi]!;
        outs[p.index].set(layerOut.subarray(0, n * width), start * width);
      });
    }
    return outs;
  }

  /** One forward; `ctx` null is inference (no dropout). */
  private pass(x: Float32Array | Float64Array, rows: number, ctx: ForwardContext | null): { tape: SimdTape; out: Float32Array } {
    const k = this.ensureCapacity(rows);
    const mem = new Float32Array(k.memory.buffer);
    const tape: SimdTape = { rows, inputs: [], z: [], y: [], masks: [], disposed: false };
    const f = this.inputs;
    let h: Float32Array = x instanceof Float32Array ? x.slice(0, rows * f) : Float32Array.from(x.subarray(0, rows * f));
    if (this.norm) {
      const { shift, scale } = this.norm;
      for (let r = 0; r < rows; r++) {
        const o = r * f;
        for (let c = 0; c < f; c++) h[o + c] = (h[o + c] - shift[c]) * scale[c];
      }
    }
    let out: Float32Array = h;
    for (let pi = 0; pi < this.plan.length; pi++) {
      const p = this.plan[pi];
      tape.inputs.push(h);
      if (p.kind === 'dropout') {
        const mask = ctx?.training ? ctx.dropoutMask(p.index, rows, p.width, p.rate) : null;
        let next = h;
        if (mask) {
          next = new Float32Array(h.length);
          for (let i = 0; i < h.length; i++) next[i] = h[i] * mask[i];
        }
        tape.masks.push(mask);
        tape.z.push(null);
        tape.y.push(null);
        h = next;
        continue;
      }
      tape.masks.push(null);
      // h (compact, width inReal) into the kernel's input region with row stride inP.
      putRows(mem, this.scratch.a, h, rows, p.inReal, p.inP);
      // ReLU is fused into the kernel's store. Its backward only asks whether z > 0, which is
      // whether y > 0, so the tape keeps y in z's place.
      const act = activationKind(p.layer.activation).f32;
      const relu = act.fusedInKernel === 'relu';
      k.dense(this.scratch.a, p.w, p.b, this.scratch.out, rows, p.inP, p.outP, relu ? 1 : 0);
      const units = p.layer.size;
      const z = takeRows(mem, this.scratch.out, rows, p.outP, units);
      const logits = this.preActivation && pi === this.plan.length - 1;
      // The loss reads the logits directly, so the last activation is never needed.
      const y = relu || logits ? z : z.slice();
      if (y !== z) act.forward(y, 0, rows, units, units, p.layer.alpha);
      tape.z.push(z);
      tape.y.push(y);
      out = logits ? z : y;
      h = y;
    }
    return { tape, out };
  }

  /**
   * Gradients per layer ([dW, db] for dense, [] for dropout) from dLoss/dOut, where Out is what
   * forwardTrain returned (the logits when preActivation). Frees the tape.
   */
  backward(f: SimdTrainForward, dOut: Float32Array | Float64Array): Float32Array[][] {
    const tape = f.tape;
    if (tape.disposed) throw new Error('SimdTrainer.backward: this tape was already used or disposed');
    const rows = tape.rows;
    if (dOut.length !== rows * this.outputs) throw new ShapeError('dLoss/dOut', [rows, this.outputs], [dOut.length], 'SimdTrainer.backward');
    const k = this.ensureCapacity(rows);
    const mem = new Float32Array(k.memory.buffer);
    const grads: Float32Array[][] = new Array(this.plan.length);
    let d: Float32Array = Float32Array.from(dOut);
    for (let pi = this.plan.length - 1; pi >= 0; pi--) {
      const p = this.plan[pi];
      if (p.kind === 'dropout') {
        const mask = tape.masks[pi];
        if (mask) for (let i = 0; i < d.length; i++) d[i] *= mask[i];
        grads[pi] = [];
        continue;
      }
      const units = p.layer.size;
      const isLast = pi === this.plan.length - 1;
      const dz = isLast && this.preActivation ? d : activationKind(p.layer.activation).f32.backward(tape.z[pi]!, tape.y[pi]!, d, rows, units, p.layer.alpha);
      // dW = hᵀ · dz: x = hᵀ [inP rows x `rows` inputs], W = dz [rows x outP].
      const h = tape.inputs[pi];
      putTransposed(mem, this.scratch.a, h, rows, p.inReal);
      putRows(mem, this.scratch.b, dz, rows, units, p.outP);
      k.dense(this.scratch.a, this.scratch.b, this.scratch.zeros, this.scratch.out, p.inReal, rows, p.outP, 0);
      const dW = takeRows(mem, this.scratch.out, p.inReal, p.outP, units);
      // db = column sums of dz, accumulated in float64.
      const db = new Float32Array(units);
      for (let j = 0; j < units; j++) {
        let s = 0;
        for (let r = 0; r < rows; r++) s += dz[r * units + j];
        db[j] = s;
      }
      grads[pi] = [dW, db];
      if (pi === 0) break;
      // dhᵀ = W · dzᵀ: x = W [inP x outP] as stored, W = dzᵀ [outP x rowsP].
      const rowsP = padded(rows);
      putTransposedPadded(mem, this.scratch.b, dz, rows, units, p.outP, rowsP);
      k.dense(p.w, this.scratch.b, this.scratch.zeros, this.scratch.out, p.inReal, p.outP, rowsP, 0);
      d = takeTransposed(mem, this.scratch.out, p.inReal, rowsP, rows);
    }
    tape.disposed = true;
    return grads;
  }

  /** Free a tape without backward. */
  discard(f: SimdTrainForward): void {
    f.tape.disposed = true;
  }

  /**
   * Copy the document's weights into the kernel again after the caller changed them: those of
   * `layers`, or (when omitted) every layer and the input normalisation.
   */
  refresh(layers?: Iterable<number>): void {
    if (layers === undefined) this.norm = inputShiftScale(this.doc.normalise, this.inputs);
    if (!this.kernel) return;
    const wanted = layers === undefined ? null : new Set(layers);
    const mem = new Float32Array(this.kernel.memory.buffer);
    for (const p of this.plan) {
      if (p.kind !== 'dense' || (wanted && !wanted.has(p.index))) continue;
      const units = p.layer.size;
      if (units === p.outP) mem.set(p.layer.weight, p.w / 4);
      else for (let r = 0; r < p.inReal; r++) mem.set(p.layer.weight.subarray(r * units, (r + 1) * units), p.w / 4 + r * p.outP);
      mem.set(p.layer.bias, p.b / 4);
    }
  }

  /** Lay out memory for batches of up to `rows` rows (rebuilt when a larger batch comes). */
  private ensureCapacity(rows: number): DenseKernel {
    if (this.kernel && rows <= this.capacityRows) return this.kernel;
    const capacity = Math.max(rows, 64);
    const rowsP = padded(capacity);
    let bytes = 0;
    const alloc = (floats: number): number => {
      const at = bytes;
      bytes += floats * 4;
      return at;
    };
    let maxIn = 0;
    let maxOut = 0;
    const placed = this.plan.map((p) => {
      if (p.kind !== 'dense') return p;
      maxIn = Math.max(maxIn, p.inP);
      maxOut = Math.max(maxOut, p.outP);
      return { ...p, w: alloc(p.inP * p.outP), b: alloc(p.outP) };
    });
    // Regions big enough for every product's x, W and output.
    const span = Math.max(rowsP * maxIn, maxIn * rowsP, rowsP * maxOut, maxIn * maxOut);
    this.scratch = { a: alloc(span), b: alloc(span), out: alloc(span), zeros: alloc(Math.max(maxOut, rowsP)) };
    this.plan.splice(0, this.plan.length, ...placed);
    this.kernel = instantiateDenseKernel(bytes);
    this.capacityRows = capacity;
    this.refresh();
    return this.kernel;
  }
}

/** Compact rows (width cols) into memory with row stride `stride`, zeros in the padding. */
function putRows(mem: Float32Array, at: number, src: Float32Array, rows: number, cols: number, stride: number): void {
  const base = at / 4;
  if (cols === stride) {
    mem.set(src.subarray(0, rows * cols), base);
    return;
  }
  for (let r = 0; r < rows; r++) {
    mem.set(src.subarray(r * cols, (r + 1) * cols), base + r * stride);
    mem.fill(0, base + r * stride + cols, base + (r + 1) * stride);
  }
}

/** Rows of width `stride` in memory, first `cols` of each, as a compact array. */
function takeRows(mem: Float32Array, at: number, rows: number, stride: number, cols: number): Float32Array {
  const base = at / 4;
  if (cols === stride) return mem.slice(base, base + rows * cols);
  const out = new Float32Array(rows * cols);
  for (let r = 0; r < rows; r++) out.set(mem.subarray(base + r * stride, base + r * stride + cols), r * cols);
  return out;
}

/** srcᵀ: src is rows x cols compact; memory gets cols x rows. */
function putTransposed(mem: Float32Array, at: number, src: Float32Array, rows: number, cols: number): void {
  const base = at / 4;
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) mem[base + c * rows + r] = src[r * cols + c];
  }
}

/** srcᵀ padded: src is rows x cols compact; memory gets colsP x rowsP, zeros outside. */
function putTransposedPadded(mem: Float32Array, at: number, src: Float32Array, rows: number, cols: number, colsP: number, rowsP: number): void {
  const base = at / 4;
  mem.fill(0, base, base + colsP * rowsP);
  for (let r = 0; r < rows; r++) {
    for (let c = 0; c < cols; c++) mem[base + c * rowsP + r] = src[r * cols + c];
  }
}

/** Memory holds m [n x rowsP]; returns the compact rows x n matrix mᵀ (first `rows` columns). */
function takeTransposed(mem: Float32Array, at: number, n: number, rowsP: number, rows: number): Float32Array {
  const base = at / 4;
  const out = new Float32Array(rows * n);
  for (let i = 0; i < n; i++) {
    for (let r = 0; r < rows; r++) out[r * n + i] = mem[base + i * rowsP + r];
  }
  return out;
}
