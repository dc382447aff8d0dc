/**
 * A hand-written WebAssembly SIMD kernel for one dense step: y = act(x·W + b), ReLU or linear
 * fused into the store. W is [nIn, outP] row-major with outP a multiple of 16 (padded with zero
 * columns), so every store is whole 128-bit lanes.
 *
 * Loop order (why): column blocks of 8 outer, rows inner. An 8-wide column panel of W is
 * nIn x 32 bytes (25 KiB for 784 inputs) and stays in L1 while every row block of the batch
 * streams past it; x (rows x nIn) stays in L2. Rows go TILE_ROWS at a time: TILE_ROWS x 8
 * outputs are 2·TILE_ROWS v128 accumulators, plus 2 weight vectors and a splat; V8 on x86-64
 * allocates 15 of the 16 SIMD registers (one is its scratch), which bounds the tile.
 * Each output sums its products in ascending k after starting from the bias, with the same
 * multiply-add instruction in every tile shape, so a row's bits never depend on its batch.
 */
import { setFlagsFromString } from 'node:v8';
import { Code, I32, V128, moduleBytes, type FunctionDef } from './wasm-emit.js';

// Parameters of dense(x, w, b, y, rows, nIn, outP, relu): byte addresses and counts.
const X = 0,
  W = 1,
  B = 2,
  Y = 3,
  ROWS = 4,
  NIN = 5,
  OUTP = 6,
  RELU = 7;

/**
 * Inputs per k block. A block's W panel (KB x 8 floats) stays in L1 while the row tiles stream
 * past (128 to 800 measured alike at 784-512-256-10, batch 256); partial sums wait in y between blocks, which changes
 * nothing numerically (the accumulators are float32 either way) and keeps the order of k.
 */
const KB = 256;

/**
 * Rows per register tile. 4 x 8 keeps 8 accumulators, 2 weight vectors and 4 splats in
 * registers, and the inner loop is 8 fused multiply-adds to 6 loads, which is what two FMA pipes
 * take per 4 cycles. Tiles of 5 and 6 rows measured 30-40% slower (784-512-256-10, batch 256),
 * presumably because the extra accumulators and row pointers no longer fit in registers.
 */
const TILE_ROWS = 4;

/** Output columns are padded with zeros to a multiple of this many floats (the kernel's widest tile). */
export const PAD = 16;
/** n rounded up to a multiple of PAD. */
export const padded = (n: number): number => Math.ceil(n / PAD) * PAD;

export interface KernelOptions {
  /** Accumulate with f32x4.relaxed_madd (default: when the runtime validates it; true where it does not throws). */
  readonly fused?: boolean;
}

/** Local indices of the dense step: the i32 locals after the 8 parameters, then the v128 ones. */
interface DenseLocals {
  readonly R: number;
  readonly J: number;
  readonly K: number;
  readonly WP: number;
  readonly YP: number;
  readonly XSTRIDE: number;
  readonly WSTRIDE: number;
  /** Start and length of the current k block, whether it is the last, first row of the single-row tail. */
  readonly K0: number;
  readonly KLEN: number;
  readonly LAST: number;
  readonly TAIL: number;
  readonly XP: readonly number[];
  readonly ACC: readonly number[];
  readonly W0: number;
  readonly W1: number;
  readonly S: number;
  readonly ZERO: number;
  readonly i32Count: number;
  readonly v128Count: number;
}

/** What every emitter of the dense step shares: the code, the multiply-add choice, the locals. */
interface DenseEmit {
  readonly c: Code;
  readonly fused: boolean;
  readonly l: DenseLocals;
}

function denseLocals(): DenseLocals {
  // Locals after the 8 parameters, i32 first, then v128.
  let next = 8;
  const i32Local = (): number => next++;
  const R = i32Local(),
    J = i32Local(),
    K = i32Local(),
    WP = i32Local(),
    YP = i32Local();
  const XSTRIDE = i32Local(),
    WSTRIDE = i32Local();
  const K0 = i32Local(),
    KLEN = i32Local(),
    LAST = i32Local(),
    TAIL = i32Local();
  const XP = Array.from({ length: TILE_ROWS }, i32Local);
  const i32Count = next - 8;
  const v128Local = (): number => next++;
  const ACC = Array.from({ length: 2 * TILE_ROWS }, v128Local);
  const W0 = v128Local(),
    W1 = v128Local(),
    S = v128Local(),
    ZERO = v128Local();
  const v128Count = next - 8 - i32Count;
  return { R, J, K, WP, YP, XSTRIDE, WSTRIDE, K0, KLEN, LAST, TAIL, XP, ACC, W0, W1, S, ZERO, i32Count, v128Count };
}

/** The float32 dense step as a module function (also emitted into the shared-memory plans). */
export function denseFunction(fused: boolean): FunctionDef {
  const l = denseLocals();
  const c = new Code();
  const e: DenseEmit = { c, fused, l };

  // Strides in bytes.
  c.get(NIN).i32(4).mul().set(l.XSTRIDE);
  c.get(OUTP).i32(4).mul().set(l.WSTRIDE);
  c.v128Zero().set(l.ZERO);

  // for (K0 = 0; K0 < nIn; K0 += KB), KLEN = min(KB, nIn - K0)
  c.i32(0).set(l.K0);
  c.block().loop();
  c.get(l.K0).get(NIN).geU().brIf(1);
  c.get(NIN).get(l.K0).sub().set(l.KLEN);
  c.get(l.KLEN).i32(KB).gtU().if();
  c.i32(KB).set(l.KLEN);
  c.end();
  c.get(l.K0).get(l.KLEN).add().get(NIN).geU().set(l.LAST);
  emitColumnPanels(e);
  emitTailRows(e);
  c.get(l.K0).i32(KB).add().set(l.K0);
  c.br(0);
  c.end().end();

  const locals = [...new Array<number>(l.i32Count).fill(I32), ...new Array<number>(l.v128Count).fill(V128)];
  return { name: 'dense', params: [I32, I32, I32, I32, I32, I32, I32, I32], locals, code: c };
}

/**
 * acc += a·b, where `push` leaves a and b on the stack. The row tiles use this and the
 * single-row pass spells out the same operand order, so every output sees one instruction.
 */
function accumulate({ c, fused }: DenseEmit, acc: number, push: () => void): void {
  if (fused) {
    push();
    c.get(acc).f32x4RelaxedMadd().set(acc);
  } else {
    c.get(acc);
    push();
    c.f32x4Mul().f32x4Add().set(acc);
  }
}

/** Row tiles: for (J = 0; J < outP; J += 8) tiles of TILE_ROWS rows; TAIL = first row left over. */
function emitColumnPanels(e: DenseEmit): void {
  const { c, l } = e;
  c.i32(0).set(l.J);
  c.i32(0).set(l.TAIL);
  c.block().loop();
  {
    c.get(l.J).get(OUTP).geU().brIf(1);
    c.i32(0).set(l.R);
    emitRowLoop(e, TILE_ROWS);
    c.get(l.R).set(l.TAIL);
    c.get(l.J).i32(8).add().set(l.J);
    c.br(0);
  }
  c.end().end();
}

/** while (R + rows <= ROWS) { tile(rows); R += rows } */
function emitRowLoop(e: DenseEmit, tileRows: number): void {
  const { c, l } = e;
  c.block().loop();
  {
    c.get(l.R).i32(tileRows).add().get(ROWS).gtU().brIf(1);
    emitTile(e, tileRows);
    c.get(l.R).i32(tileRows).add().set(l.R);
    c.br(0);
  }
  c.end().end();
}

/** The rows left over, one at a time: for (R = TAIL; R < rows; R++) rowStream() */
function emitTailRows(e: DenseEmit): void {
  const { c, l } = e;
  c.get(l.TAIL).set(l.R);
  c.block().loop();
  {
    c.get(l.R).get(ROWS).geU().brIf(1);
    emitRowStream(e);
    c.get(l.R).i32(1).add().set(l.R);
    c.br(0);
  }
  c.end().end();
}

/** One tile of `tileRows` rows x 8 columns at row R, column J. */
function emitTile(e: DenseEmit, tileRows: number): void {
  const { c, l } = e;
  const { ACC, XP } = l;
  emitTileStart(e, tileRows);
  // Row pointers into x, at column K0.
  c.get(X).get(l.R).get(l.XSTRIDE).mul().add().get(l.K0).i32(4).mul().add().set(XP[0]);
  for (let t = 1; t < tileRows; t++)
    c.get(XP[t - 1])
      .get(l.XSTRIDE)
      .add()
      .set(XP[t]);
  c.get(W).get(l.K0).get(l.WSTRIDE).mul().add().get(l.J).i32(4).mul().add().set(l.WP);
  c.get(l.KLEN).set(l.K);
  c.block().loop();
  {
    c.get(l.WP).v128Load(0).set(l.W0);
    c.get(l.WP).v128Load(16).set(l.W1);
    for (let t = 0; t < tileRows; t++) {
      c.get(XP[t]).load32Splat(0).set(l.S);
      accumulate(e, ACC[2 * t], () => c.get(l.S).get(l.W0));
      accumulate(e, ACC[2 * t + 1], () => c.get(l.S).get(l.W1));
      c.get(XP[t]).i32(4).add().set(XP[t]);
    }
    c.get(l.WP).get(l.WSTRIDE).add().set(l.WP);
    c.get(l.K).i32(1).sub().tee(l.K).i32(0).ne().brIf(0);
  }
  c.end().end();
  c.get(RELU).get(l.LAST).and().if();
  for (let a = 0; a < 2 * tileRows; a++) c.get(ACC[a]).get(l.ZERO).f32x4Max().set(ACC[a]);
  c.end();
  // Store: y[(R + t) * outP + J ...].
  for (let t = 0; t < tileRows; t++) {
    c.get(l.YP)
      .get(ACC[2 * t])
      .v128Store(0);
    c.get(l.YP)
      .get(ACC[2 * t + 1])
      .v128Store(16);
    if (t < tileRows - 1) c.get(l.YP).get(l.WSTRIDE).add().set(l.YP);
  }
}

/** A tile's accumulators start at the bias in the first k block, else at the partial sums in y. */
function emitTileStart({ c, l }: DenseEmit, tileRows: number): void {
  const { ACC } = l;
  c.get(Y).get(l.R).get(l.WSTRIDE).mul().add().get(l.J).i32(4).mul().add().set(l.YP);
  c.get(l.K0).eqz().if();
  {
    c.get(B).get(l.J).i32(4).mul().add().set(l.WP); // WP reused briefly as the bias pointer
    c.get(l.WP).v128Load(0).set(ACC[0]);
    c.get(l.WP).v128Load(16).set(ACC[1]);
    for (let t = 1; t < tileRows; t++) {
      c.get(ACC[0]).set(ACC[2 * t]);
      c.get(ACC[1]).set(ACC[2 * t + 1]);
    }
  }
  c.else();
  {
    c.get(l.YP).set(l.WP);
    for (let t = 0; t < tileRows; t++) {
      c.get(l.WP)
        .v128Load(0)
        .set(ACC[2 * t]);
      c.get(l.WP)
        .v128Load(16)
        .set(ACC[2 * t + 1]);
      c.get(l.WP).get(l.WSTRIDE).add().set(l.WP);
    }
  }
  c.end();
}

/**
 * One row, all columns, streaming W in memory order: y[R, :] += x[R, k] · W[k, :] for each k of
 * the block, the running sums kept in y (L1-resident: one row of outputs). A lone row has no
 * row reuse, so reading W is the whole cost, and reading it front to back is what the
 * hardware prefetcher serves best. Each output still sums from the bias in ascending k with
 * the same multiply-add as the row tiles, so a row's answer never depends on which other rows
 * share its batch (a service gives the same answer alone or under load).
 */
function emitRowStream(e: DenseEmit): void {
  const { c, l } = e;
  // YP = &y[R, 0]; in the first k block the sums start at the bias.
  c.get(Y).get(l.R).get(l.WSTRIDE).mul().add().set(l.YP);
  c.get(l.K0).eqz().if();
  emitRowSweep(e, () => c.get(l.YP).get(l.J).add().get(B).get(l.J).add().v128Load(0).v128Store(0));
  c.end();
  c.get(X).get(l.R).get(l.XSTRIDE).mul().add().get(l.K0).i32(4).mul().add().set(l.XP[0]);
  c.get(W).get(l.K0).get(l.WSTRIDE).mul().add().set(l.WP);
  c.get(l.KLEN).set(l.K);
  c.block().loop();
  {
    c.get(l.XP[0]).load32Splat(0).set(l.S);
    emitRowMultiplyAdd(e);
    c.get(l.WP).get(l.WSTRIDE).add().set(l.WP);
    c.get(l.XP[0]).i32(4).add().set(l.XP[0]);
    c.get(l.K).i32(1).sub().tee(l.K).i32(0).ne().brIf(0);
  }
  c.end().end();
  c.get(RELU).get(l.LAST).and().if();
  emitRowSweep(e, () => c.get(l.YP).get(l.J).add().get(l.YP).get(l.J).add().v128Load(0).get(l.ZERO).f32x4Max().v128Store(0));
  c.end();
}

/** for (J = 0; J < outP * 4; J += 16) body(): one pass over a row of y, 4 floats at a time. */
function emitRowSweep({ c, l }: DenseEmit, body: () => void): void {
  c.i32(0).set(l.J);
  c.block().loop();
  {
    body();
    c.get(l.J).i32(16).add().tee(l.J).get(l.WSTRIDE).ltU().brIf(0);
  }
  c.end().end();
}

/** for (J = 0; J < outP * 4; J += 64): 16 columns of y at YP + J from W at WP + J. */
function emitRowMultiplyAdd({ c, fused, l }: DenseEmit): void {
  c.i32(0).set(l.J);
  c.block().loop();
  {
    for (let q = 0; q < 4; q++) {
      c.get(l.YP).get(l.J).add();
      if (fused)
        c.get(l.S)
          .get(l.WP)
          .get(l.J)
          .add()
          .v128Load(16 * q)
          .get(l.YP)
          .get(l.J)
          .add()
          .v128Load(16 * q)
          .f32x4RelaxedMadd();
      else
        c.get(l.YP)
          .get(l.J)
          .add()
          .v128Load(16 * q)
          .get(l.S)
          .get(l.WP)
          .get(l.J)
          .add()
          .v128Load(16 * q)
          .f32x4Mul()
          .f32x4Add();
      c.v128Store(16 * q);
    }
    c.get(l.J).i32(64).add().tee(l.J).get(l.WSTRIDE).ltU().brIf(0);
  }
  c.end().end();
}

/**
 * Whether f32x4.relaxed_madd validates here. Node 20's V8 has relaxed SIMD behind a flag, so the
 * flag is switched on first (process-wide, which also covers worker threads); validation alone
 * decides, so a runtime that refuses the flag simply keeps the plain multiply and add.
 */
let relaxedMadd: boolean | null = null;
export function relaxedMaddAvailable(): boolean {
  if (relaxedMadd !== null) return relaxedMadd;
  const probe = new Code().get(0).get(1).get(2).f32x4RelaxedMadd();
  const bytes = moduleBytes(1, [{ name: 'probe', params: [V128, V128, V128], results: [V128], locals: [], code: probe }]);
  relaxedMadd = validatesWithRelaxedSimd(bytes);
  return relaxedMadd;
}

/**
 * Whether `bytes` (a module using relaxed SIMD) validates here. Node 20's V8 has relaxed SIMD
 * behind a flag: when the module does not validate as things are, the flag is switched on
 * (process-wide, before any such module is compiled) and the module tried again.
 */
export function validatesWithRelaxedSimd(bytes: Uint8Array): boolean {
  const validate = (): boolean => {
    try {
      return wasmApi().validate(bytes);
    } catch {
      return false;
    }
  };
  if (validate()) return true;
  try {
    setFlagsFromString('--experimental-wasm-relaxed-simd');
  } catch {
    // No such flag on this runtime: the kernels without relaxed SIMD serve.
  }
  return validate();
}

/** The little of the WebAssembly JS API used here (this project's TypeScript libs do not declare it). */
interface WasmMemory {
  readonly buffer: ArrayBuffer;
}
export interface WasmApi {
  readonly Module: new (bytes: Uint8Array) => object;
  readonly validate: (bytes: Uint8Array) => boolean;
  readonly Instance: new (module: object, imports: object) => { readonly exports: Record<string, unknown> };
  readonly Memory: new (descriptor: { initial: number; maximum?: number; shared?: boolean }) => { readonly buffer: ArrayBuffer | SharedArrayBuffer };
}

/** The one typed adapter over the untyped global. */
export function wasmApi(): WasmApi {
  const api: unknown = Reflect.get(globalThis, 'WebAssembly');
  if (typeof api !== 'object' || api === null) throw new Error('WebAssembly is not available in this runtime');
  const typed: WasmApi = Reflect.get(globalThis, 'WebAssembly');
  return typed;
}

function isMemory(value: unknown): value is WasmMemory {
  return typeof value === 'object' && value !== null && Reflect.get(value, 'buffer') instanceof ArrayBuffer;
}

/** The kernel's exports once instantiated. */
export interface DenseKernel {
  readonly memory: WasmMemory;
  /** y = act(x·W + b) over `rows` rows; addresses in bytes; `relu` 1 or 0. nIn >= 1, outP % 16 == 0. */
  dense(x: number, w: number, b: number, y: number, rows: number, nIn: number, outP: number, relu: number): void;
}

/**
 * Compile the kernel with a memory of `bytes` (rounded up to 64 KiB pages).
 * @example const k = instantiateDenseKernel(1 << 20); k.dense(x, w, b, y, rows, nIn, outP, 1);
 */
export function instantiateDenseKernel(bytes: number, options: KernelOptions = {}): DenseKernel {
  const pages = Math.max(1, Math.ceil(bytes / 65536));
  const wasm = wasmApi();
  // Asking for the fused kernel still goes through detection, which switches the V8 flag on.
  const available = relaxedMaddAvailable();
  const fused = options.fused ?? available;
  if (fused && !available) throw new Error('fast dense kernel: f32x4.relaxed_madd is not available in this runtime');
  const instance = new wasm.Instance(new wasm.Module(moduleBytes(pages, [denseFunction(fused)])), {});
  const { memory, dense } = instance.exports;
  if (!isMemory(memory) || typeof dense !== 'function') throw new Error('fast dense kernel: unexpected exports');
  return {
    memory,
    dense: (x, w, b, y, rows, nIn, outP, relu) => {
      dense(x, w, b, y, rows, nIn, outP, relu);
    },
  };
}

/** Whether this runtime runs WebAssembly fixed-width SIMD (the kernel needs it). */
export function wasmSimdAvailable(): boolean {
  try {
    instantiateDenseKernel(65536);
    return true;
  } catch {
    return false;
  }
}
