/**
 * A model compiled into one WebAssembly module over one shared memory, run on one thread or
 * split by rows across several. Opening the model lays out the memory once (weights, the input
 * chunk, two activation buffers, and for integer arithmetic the quantised rows and their per-row
 * scales) and emits "segments": functions seg<i>(row0, rows) that run a stretch of layers for a
 * range of rows with every address fixed in the code. A segment ends where a step has no
 * WebAssembly form (an activation other than ReLU or linear); that step runs in JavaScript on
 * all rows of the chunk between segments, through the activation catalogue's float64 forward.
 *
 * Arithmetic per dense layer:
 * - 'f32': the fast engine's float32 kernel (dense-kernel.ts), weights as the document holds them;
 * - 'relaxed' / 'i16': the integer kernels (int8/kernels.ts) on the layer's int8 codes, those the
 *   file stored when it was read from an i8 file, else quantised at open the way `shrink` does.
 *
 * A row's answer never depends on the other rows of its chunk or on the thread that ran it: each
 * row goes through the same instructions, and integer sums have no order.
 *
 * Memory per thread: the activation buffers are reused layer after layer with each layer's own
 * row stride, so a thread's rows live in its own region of each buffer, starting at
 * row0 · (the widest row): threads at different layers never touch each other's bytes. The input
 * and the per-row scales keep one stride and stay in plain row order.
 */
import { ModelFileError, ShapeError } from '../errors.js';
import { quantiseColumns, storedCodesOf, type Int8Matrix } from '../format/int8.js';
import {
  activationKind,
  batchNormAffine,
  inputShiftScale,
  modelWidths,
  validateModel,
  type ActivationName,
  type DenseLayer,
  type ModelDoc,
} from '../model/index.js';
import { denseFunction, padded, relaxedMaddAvailable, wasmApi } from './fast/dense-kernel.js';
import { Code, I32, moduleBytes, type FunctionDef } from './fast/wasm-emit.js';
import {
  affineFunction,
  CODE_BYTES,
  columnSums,
  denseInt8Function,
  fixedQuantBytes,
  fixedQuantParams,
  MAX_INT8_INPUTS,
  packInt8Weights,
  quantiseFunction,
  type FixedQuant,
  type Int8Arith,
} from './int8/kernels.js';
import { ThreadTeam, type Share } from './threads.js';

export type SharedArith = 'f32' | Int8Arith;

export interface SharedMemoryRunnerOptions {
  readonly arith: SharedArith;
  /** Threads, the caller included. Default 1. */
  readonly threads?: number;
  /** Rows per pass through the module; bounds the buffers. Default 256 per thread. */
  readonly chunkRows?: number;
  /** Names the model in errors. */
  readonly source?: string;
}

// Every activation width is padded like the fast engine's (16 floats: the kernels' widest store,
// and whole groups of 4 inputs for the integer dot products).
const align = (n: number): number => Math.ceil(n / 64) * 64;

/** One JavaScript pass between segments: an activation on a layer's real columns. */
interface ActivationPass {
  /** Start of the buffer; each share's rows start at at + row0 · region. */
  readonly at: number;
  readonly region: number;
  readonly stride: number;
  readonly cols: number;
  readonly activation: ActivationName;
  readonly alpha: number;
}

/** Where each dense layer's integer codes came from, for what `show` says. */
export type CodesOrigin = 'stored' | 'quantised at open';

export class SharedMemoryRunner {
  readonly inputs: number;
  readonly outputs: number;
  readonly chunkRows: number;
  readonly arith: SharedArith;
  /** Per dense layer (in order), where its int8 codes came from; empty for float32 arithmetic. */
  readonly codes: CodesOrigin[] = [];
  private readonly mem: Float32Array;
  private readonly segmentFns: ((row0: number, rows: number) => void)[];
  private readonly passes: (ActivationPass | null)[];
  private readonly team: ThreadTeam | null;
  private readonly inP: number;
  private readonly xAt: number;
  private readonly out: { at: number; stride: number; region: number };
  private disposed = false;

  constructor(
    readonly doc: ModelDoc,
    opts: SharedMemoryRunnerOptions,
  ) {
    const source = opts.source ?? '(model)';
    validateModel(doc, source);
    const widths = modelWidths(doc);
    this.inputs = widths[0];
    this.outputs = widths[widths.length - 1];
    this.arith = opts.arith;
    const threads = Math.max(1, Math.floor(opts.threads ?? 1));
    this.chunkRows = opts.chunkRows ?? 256 * threads;
    if (!(Number.isInteger(this.chunkRows) && this.chunkRows > 0)) throw new RangeError(`chunkRows must be a positive integer, got ${this.chunkRows}`);
    this.inP = padded(this.inputs);

    // 1. Lay out the memory: constants first, then the per-call regions.
    const constants = new ConstantLayout();
    const { steps, maxWidth } = planSteps(doc, widths, this.inP, opts.arith, source, constants, this.codes);
    const buffers = layoutBuffers(constants.top, this.chunkRows, this.inP, maxWidth, opts.arith);
    this.xAt = buffers.xAt;

    // 2. Emit the kernels and the segments.
    const fused = opts.arith === 'f32' && relaxedMaddAvailable();
    const kernels: FunctionDef[] = [
      opts.arith === 'f32' ? denseFunction(fused) : denseInt8Function(opts.arith),
      affineFunction('affine', 'scale-shift'),
      affineFunction('normalise', 'shift-scale'),
      ...(opts.arith !== 'f32' ? [quantiseFunction(opts.arith), quantiseFunction(opts.arith, 'fixed')] : []),
    ];
    const { segments, passes, out } = emitSegments(steps, buffers, this.inP, opts.arith);
    this.passes = passes;
    this.out = out;
    const segmentDefs: FunctionDef[] = segments.map((code, i) => ({ name: `seg${i}`, params: [I32, I32], locals: [], code }));
    const bytes = moduleBytes(buffers.pages, [...kernels, ...segmentDefs], { sharedMemory: true });

    // 3. Instantiate over a fresh shared memory, write the constants, start the helpers.
    const wasm = wasmApi();
    const memory = new wasm.Memory({ initial: buffers.pages, maximum: buffers.pages, shared: true });
    const module = new wasm.Module(bytes);
    const instance = new wasm.Instance(module, { env: { memory } });
    const raw = new Uint8Array(memory.buffer);
    for (const blob of constants.blobs) raw.set(blob.bytes, blob.at);
    this.mem = new Float32Array(memory.buffer);
    this.segmentFns = segmentDefs.map((def) => {
      const fn = instance.exports[def.name];
      if (typeof fn !== 'function') throw new Error(`shared-memory runner: segment ${def.name} missing from the module`);
      return (row0: number, rows: number) => void fn(row0, rows);
    });
    this.team =
      threads > 1
        ? new ThreadTeam(
            module,
            memory,
            segmentDefs.map((d) => d.name),
            threads,
          )
        : null;
  }

  /** Threads taking rows right now, the caller included. */
  get threads(): number {
    return this.team?.threads ?? 1;
  }

  /** Resolves once the helper threads have started (before that the caller runs every row). */
  async ready(): Promise<void> {
    await this.team?.ready();
  }

  /**
   * Inference on raw features (rows x inputs, row-major); returns a new rows x outputs array.
   * @throws ShapeError when data does not hold rows x inputs values.
   */
  run(data: Float32Array, rows: number): Float32Array {
    if (this.disposed) throw new Error('SharedMemoryRunner.run: this runner was disposed');
    if (!(Number.isInteger(rows) && rows >= 0) || data.length !== rows * this.inputs) {
      throw new ShapeError('input', [`${rows} x ${this.inputs} = ${rows * this.inputs} values`], [data.length], 'SharedMemoryRunner.run');
    }
    const out = new Float32Array(rows * this.outputs);
    const mem = this.mem;
    const f = this.inputs;
    const xAt = this.xAt / 4;
    for (let start = 0; start < rows; start += this.chunkRows) {
      const n = Math.min(this.chunkRows, rows - start);
      // The one copy of the rows: into the shared input region (padding columns stay zero).
      const copy = (row0: number, count: number): void => {
        if (this.inP === f) mem.set(data.subarray((start + row0) * f, (start + row0 + count) * f), xAt + row0 * f);
        else for (let r = row0; r < row0 + count; r++) mem.set(data.subarray((start + r) * f, (start + r + 1) * f), xAt + r * this.inP);
      };
      // One split per chunk: every segment, pass and the output copy agree on where rows live.
      const shares: readonly Share[] = this.team ? this.team.split(n) : [{ row0: 0, rows: n }];
      // The helpers' rows first; the caller copies its own after waking them, while they start.
      for (const share of shares.slice(1)) copy(share.row0, share.rows);
      this.segmentFns.forEach((segment, s) => {
        const own = s === 0 ? (row0: number, count: number) => (copy(row0, count), segment(row0, count)) : segment;
        if (this.team) this.team.run(s, shares, own);
        else own(0, n);
        const pass = this.passes[s];
        if (pass) for (const share of shares) activate(mem, pass, share);
      });
      const { at, stride, region } = this.out;
      const cols = this.outputs;
      for (const share of shares) {
        const base = (at + share.row0 * region) / 4;
        for (let r = 0; r < share.rows; r++) out.set(mem.subarray(base + r * stride, base + r * stride + cols), (start + share.row0 + r) * cols);
      }
    }
    return out;
  }

  /** Stop the helper threads; later runs are refused. */
  dispose(): void {
    this.disposed = true;
    this.team?.close();
  }
}

/** An activation on the real columns of a share's rows, through the catalogue's float64 forward, stored as float32. */
function activate(mem: Float32Array, pass: ActivationPass, share: Share): void {
  const kind = activationKind(pass.activation);
  const rows = share.rows;
  const z = new Float64Array(rows * pass.cols);
  const base = (pass.at + share.row0 * pass.region) / 4;
  for (let r = 0; r < rows; r++) for (let c = 0; c < pass.cols; c++) z[r * pass.cols + c] = mem[base + r * pass.stride + c];
  const y = kind.refForward(z, rows, pass.cols, pass.alpha);
  for (let r = 0; r < rows; r++) for (let c = 0; c < pass.cols; c++) mem[base + r * pass.stride + c] = y[r * pass.cols + c];
}

/** The module's constants, placed one after another from address 0, each start aligned. */
class ConstantLayout {
  readonly blobs: { at: number; bytes: Uint8Array }[] = [];
  /** The first free (aligned) address after the constants. */
  top = 0;
  place(bytes: Uint8Array): number {
    const at = this.top;
    this.blobs.push({ at, bytes });
    this.top = align(this.top + bytes.length);
    return at;
  }
}

const f32Bytes = (a: Float32Array): Uint8Array => new Uint8Array(a.buffer, a.byteOffset, a.byteLength);

/** One step of the module with the addresses of its constants. */
type Step =
  | { kind: 'normalise'; shift: number; scale: number }
  | {
      kind: 'dense';
      k: number;
      outP: number;
      out: number;
      relu: boolean;
      w: number;
      b: number;
      cs: number;
      ws: number;
      /** Address of the stored range's (scale, 1/scale, zero), or -1 for each row's own range. */
      range: number;
      activation: ActivationName;
      alpha: number;
    }
  | { kind: 'affine'; scale: number; shift: number; width: number };

/**
 * The steps of the model in order, their constants placed; `codes` gets where each dense layer's
 * int8 codes came from.
 * @throws ModelFileError when a dense layer has more inputs than the int8 sums can hold.
 */
function planSteps(
  doc: ModelDoc,
  widths: number[],
  inP: number,
  arith: SharedArith,
  source: string,
  constants: ConstantLayout,
  codes: CodesOrigin[],
): { steps: Step[]; maxWidth: number } {
  const steps: Step[] = [];
  const norm = inputShiftScale(doc.normalise, widths[0]);
  if (norm) {
    const shift = new Float32Array(inP);
    const scale = new Float32Array(inP);
    shift.set(norm.shift);
    scale.set(norm.scale);
    steps.push({ kind: 'normalise', shift: constants.place(f32Bytes(shift)), scale: constants.place(f32Bytes(scale)) });
  }
  let width = inP;
  let maxWidth = width;
  const problems: { where: string; message: string }[] = [];
  let denseOrdinal = 0;
  doc.layers.forEach((layer, index) => {
    if (layer.kind === 'dense') {
      const ranges = doc.activationRanges;
      const range = ranges ? fixedQuantParams(ranges.min[denseOrdinal], ranges.max[denseOrdinal]) : null;
      denseOrdinal++;
      const realIn = widths[index];
      if (arith === 'f32') steps.push(denseF32Step(layer, realIn, width, constants));
      else {
        if (width > MAX_INT8_INPUTS) {
          problems.push({
            where: `layers[${index}] (dense)`,
            message: `${realIn} inputs (${width} padded) are more than the int8 engine accepts (${MAX_INT8_INPUTS}): its 32-bit sums could overflow; run this model with --engine fast`,
          });
          return;
        }
        steps.push(denseInt8Step(layer, realIn, width, arith, constants, codes, range));
      }
      width = padded(layer.size);
      maxWidth = Math.max(maxWidth, width);
    } else if (layer.kind === 'batchnorm') {
      // Inference form folded in float64 like the fast engine: y = x · scale + shift.
      const folded = batchNormAffine(layer);
      const scale = new Float32Array(width);
      const shift = new Float32Array(width);
      scale.set(folded.scale);
      shift.set(folded.shift);
      steps.push({ kind: 'affine', scale: constants.place(f32Bytes(scale)), shift: constants.place(f32Bytes(shift)), width });
    }
    // dropout: identity at inference.
  });
  if (problems.length > 0) throw new ModelFileError(source, problems);
  return { steps, maxWidth };
}

/** The bias padded to outP columns, placed. */
function placeBias(layer: DenseLayer, outP: number, constants: ConstantLayout): number {
  const bias = new Float32Array(outP);
  bias.set(layer.bias);
  return constants.place(f32Bytes(bias));
}

/** A float32 dense step: the weights as the document holds them, padded to width x outP. */
function denseF32Step(layer: DenseLayer, realIn: number, width: number, constants: ConstantLayout): Step {
  const outP = padded(layer.size);
  const relu = layer.activation === 'relu';
  const w = new Float32Array(width * outP);
  for (let k = 0; k < realIn; k++) w.set(layer.weight.subarray(k * layer.size, (k + 1) * layer.size), k * outP);
  const wAt = constants.place(f32Bytes(w));
  return {
    kind: 'dense',
    k: width,
    outP,
    out: layer.size,
    relu,
    w: wAt,
    b: placeBias(layer, outP, constants),
    cs: -1,
    ws: -1,
    range: -1,
    activation: layer.activation,
    alpha: layer.alpha,
  };
}

/** An integer dense step: the stored codes, else the layer quantised the way `shrink` does. */
function denseInt8Step(
  layer: DenseLayer,
  realIn: number,
  width: number,
  arith: Int8Arith,
  constants: ConstantLayout,
  codes: CodesOrigin[],
  range: FixedQuant | null,
): Step {
  const outP = padded(layer.size);
  const stored = storedCodesOf(layer.weight, realIn, layer.size);
  const m: Int8Matrix = stored ?? quantiseColumns(layer.weight, realIn, layer.size);
  codes.push(stored ? 'stored' : 'quantised at open');
  const ws = new Float32Array(outP);
  ws.set(m.scales);
  const packed = packInt8Weights(m.codes, realIn, layer.size, width, outP, arith);
  const sums = columnSums(m.codes, realIn, layer.size, outP);
  return {
    kind: 'dense',
    k: width,
    outP,
    out: layer.size,
    relu: layer.activation === 'relu',
    w: constants.place(packed),
    b: placeBias(layer, outP, constants),
    cs: constants.place(new Uint8Array(sums.buffer)),
    ws: constants.place(f32Bytes(ws)),
    range: range ? constants.place(fixedQuantBytes(range)) : -1,
    activation: layer.activation,
    alpha: layer.alpha,
  };
}

/** Where the per-call regions live, after the constants. */
interface BufferLayout {
  /** The input chunk (plain row order, stride inP). */
  readonly xAt: number;
  /** Bytes of one row's region in the activation and code buffers (see the header). */
  readonly region: number;
  readonly qRegion: number;
  /** The two activation buffers, used in turn. */
  readonly bufAt: readonly number[];
  /** The quantised rows and their per-row (scale, zero) pairs. */
  readonly qAt: number;
  readonly pAt: number;
  readonly codeBytes: number;
  readonly pages: number;
}

function layoutBuffers(top: number, chunk: number, inP: number, maxWidth: number, arith: SharedArith): BufferLayout {
  const integer = arith !== 'f32';
  const codeBytes = arith === 'f32' ? 0 : CODE_BYTES[arith];
  const xAt = top;
  top = align(top + chunk * inP * 4);
  const region = maxWidth * 4;
  const qRegion = maxWidth * codeBytes;
  const bufAt = [top, align(top + chunk * maxWidth * 4)];
  top = align(bufAt[1] + chunk * maxWidth * 4);
  const qAt = top;
  top = align(top + (integer ? chunk * maxWidth * codeBytes : 0));
  const pAt = top;
  top = align(top + (integer ? chunk * 8 : 0));
  const pages = Math.max(1, Math.ceil(top / 65536));
  return { xAt, region, qRegion, bufAt, qAt, pAt, codeBytes, pages };
}

// Function indices of the kernels in the module, and the parameters of a segment.
const DENSE = 0,
  AFFINE = 1,
  NORMALISE = 2,
  QUANTISE = 3,
  QUANTISE_FIXED = 4;
const ROW0 = 0,
  ROWS = 1;

/** Push base + row0 · stride (the input and the per-row scales: plain row order). */
const rowAddr = (c: Code, base: number, stride: number): Code => c.i32(base).get(ROW0).i32(stride).mul().add();
/** Push the start of this thread's region of an activation or code buffer. */
const regionAddr = (c: Code, base: number, bytes: number): Code => c.i32(base).get(ROW0).i32(bytes).mul().add();

/**
 * The segments: calls of the kernels with every address fixed, a new segment after each step
 * whose activation runs in JavaScript (its pass), then where the output rows are.
 */
function emitSegments(
  steps: Step[],
  buffers: BufferLayout,
  inP: number,
  arith: SharedArith,
): { segments: Code[]; passes: (ActivationPass | null)[]; out: { at: number; stride: number; region: number } } {
  const { xAt, region, bufAt } = buffers;
  const segments: Code[] = [new Code()];
  const passes: (ActivationPass | null)[] = [];
  /** The current activation: the input (plain rows) or a buffer (regions). */
  const at = (c: Code, base: number, stride: number): Code => (base === xAt ? rowAddr(c, base, stride * 4) : regionAddr(c, base, region));
  let from = xAt;
  let fromStride = inP;
  let which = 0;
  for (const step of steps) {
    const c = segments[segments.length - 1];
    if (step.kind === 'normalise') {
      rowAddr(c, xAt, inP * 4)
        .i32(inP * 4)
        .get(ROWS)
        .i32(inP)
        .i32(step.scale)
        .i32(step.shift)
        .call(NORMALISE);
    } else if (step.kind === 'affine') {
      at(c, from, fromStride)
        .i32(fromStride * 4)
        .get(ROWS)
        .i32(step.width)
        .i32(step.scale)
        .i32(step.shift)
        .call(AFFINE);
    } else {
      const to = bufAt[which];
      at(c, from, step.k);
      if (arith === 'f32') emitDenseF32Call(c, step, to, region);
      else emitDenseInt8Call(c, step, to, buffers);
      from = to;
      fromStride = step.outP;
      which ^= 1;
      if (!step.relu && step.activation !== 'linear') {
        passes.push({ at: to, region, stride: step.outP, cols: step.out, activation: step.activation, alpha: step.alpha });
        segments.push(new Code());
      }
    }
  }
  passes.push(null);
  return { segments, passes, out: { at: from, stride: fromStride, region: from === xAt ? fromStride * 4 : region } };
}

type DenseStep = Extract<Step, { kind: 'dense' }>;

/** dense(x, w, b, y, rows, nIn, outP, relu), x already pushed. */
function emitDenseF32Call(c: Code, step: DenseStep, to: number, region: number): void {
  c.i32(step.w).i32(step.b);
  regionAddr(c, to, region)
    .get(ROWS)
    .i32(step.k)
    .i32(step.outP)
    .i32(step.relu ? 1 : 0)
    .call(DENSE);
}

/** quantise(x, ...) then denseI8(q, ...), x already pushed. */
function emitDenseInt8Call(c: Code, step: DenseStep, to: number, buffers: BufferLayout): void {
  const { qAt, qRegion, pAt, region, codeBytes } = buffers;
  const qStride = step.k * codeBytes;
  c.i32(step.k * 4)
    .get(ROWS)
    .i32(step.k);
  regionAddr(c, qAt, qRegion).i32(qStride);
  rowAddr(c, pAt, 8);
  if (step.range >= 0) c.i32(step.range).call(QUANTISE_FIXED);
  else c.call(QUANTISE);
  regionAddr(c, qAt, qRegion).i32(qStride);
  rowAddr(c, pAt, 8).i32(step.w).i32(step.cs).i32(step.ws).i32(step.b);
  regionAddr(c, to, region)
    .i32(step.outP * 4)
    .get(ROWS)
    .i32(step.k / 4)
    .i32(step.outP)
    .i32(step.relu ? 1 : 0)
    .call(DENSE);
}
