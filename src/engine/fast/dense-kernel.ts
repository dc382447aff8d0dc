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
const X = 0, W = 1, B = 2, Y = 3, ROWS = 4, NIN = 5, OUTP = 6, RELU = 7;

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

/** The float32 dense step as a module function (also emitted into the shared-memory plans). */
export function denseFunction(fused: boolean): FunctionDef {
  // Locals after the 8 parameters, i32 first, then v128.
  let next = 8;
  const i32Local = (): number => next++;
  const R = i32Local(), J = i32Local(), K = i32Local(), WP = i32Local(), YP = i32Local();
  const XSTRIDE = i32Local(), WSTRIDE = i32Local();
  // Start and length of the current k block, whether it is the last, first row of the single-row tail.
  const K0 = i32Local(), KLEN = i32Local(), LAST = i32Local(), TAIL = i32Local();
  const XP = Array.from({ length: TILE_ROWS }, i32Local);
  const i32Count = next - 8;
  const v128Local = (): number => next++;
  const ACC = Array.from({ length: 2 * TILE_ROWS }, v128Local);
  const W0 = v128Local(), W1 = v128Local(), S = v128Local(), ZERO = v128Local();
  const v128Count = next - 8 - i32Count;

  const c = new Code();
  /**
   * acc += a·b, where `push` leaves a and b on the stack. The row tiles use this and the
   * single-row pass spells out the same operand order, so every output sees one instruction.
   */
  const accumulate = (acc: number, push: () => void): void => {
    if (fused) {
      push();
      c.get(acc).f32x4RelaxedMadd().set(acc);
    } else {
      c.get(acc);
      push();
      c.f32x4Mul().f32x4Add().set(acc);
    }
  };

  // Strides in bytes.
  c.get(NIN).i32(4).mul().set(XSTRIDE);
  c.get(OUTP).i32(4).mul().set(WSTRIDE);
  c.v128Zero().set(ZERO);

  /** One tile of `tileRows` rows x 8 columns at row R, column J. */
  const tile = (tileRows: number): void => {
    // Accumulators start at the bias in the first k block, else at the partial sums in y.
    c.get(Y).get(R).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().set(YP);
    c.get(K0).eqz().if();
    {
      c.get(B).get(J).i32(4).mul().add().set(WP); // WP reused briefly as the bias pointer
      c.get(WP).v128Load(0).set(ACC[0]);
      c.get(WP).v128Load(16).set(ACC[1]);
      for (let t = 1; t < tileRows; t++) {
        c.get(ACC[0]).set(ACC[2 * t]);
        c.get(ACC[1]).set(ACC[2 * t + 1]);
      }
    }
    c.else();
    {
      c.get(YP).set(WP);
      for (let t = 0; t < tileRows; t++) {
        c.get(WP).v128Load(0).set(ACC[2 * t]);
        c.get(WP).v128Load(16).set(ACC[2 * t + 1]);
        c.get(WP).get(WSTRIDE).add().set(WP);
      }
    }
    c.end();
    // Row pointers into x, at column K0.
    c.get(X).get(R).get(XSTRIDE).mul().add().get(K0).i32(4).mul().add().set(XP[0]);
    for (let t = 1; t < tileRows; t++) c.get(XP[t - 1]).get(XSTRIDE).add().set(XP[t]);
    c.get(W).get(K0).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().set(WP);
    c.get(KLEN).set(K);
    c.block().loop();
    {
      c.get(WP).v128Load(0).set(W0);
      c.get(WP).v128Load(16).set(W1);
      for (let t = 0; t < tileRows; t++) {
        c.get(XP[t]).load32Splat(0).set(S);
        accumulate(ACC[2 * t], () => c.get(S).get(W0));
        accumulate(ACC[2 * t + 1], () => c.get(S).get(W1));
        c.get(XP[t]).i32(4).add().set(XP[t]);
      }
      c.get(WP).get(WSTRIDE).add().set(WP);
      c.get(K).i32(1).sub().tee(K).i32(0).ne().brIf(0);
    }
    c.end().end();
    c.get(RELU).get(LAST).and().if();
    for (let a = 0; a < 2 * tileRows; a++) c.get(ACC[a]).get(ZERO).f32x4Max().set(ACC[a]);
    c.end();
    // Store: y[(R + t) * outP + J ...].
    for (let t = 0; t < tileRows; t++) {
      c.get(YP).get(ACC[2 * t]).v128Store(0);
      c.get(YP).get(ACC[2 * t + 1]).v128Store(16);
      if (t < tileRows - 1) c.get(YP).get(WSTRIDE).add().set(YP);
    }
  };

  /**
   * One row, all columns, streaming W in memory order: y[R, :] += x[R, k] · W[k, :] for each k of
   * the block, the running sums kept in y (L1-resident: one row of outputs). A lone row has no
   * row reuse, so reading W is the whole cost, and reading it front to back is what the
   * hardware prefetcher serves best. Each output still sums from the bias in ascending k with
   * the same multiply-add as the row tiles, so a row's answer never depends on which other rows
   * share its batch (a service gives the same answer alone or under load).
   */
  const rowStream = (): void => {
    // YP = &y[R, 0]; in the first k block the sums start at the bias.
    c.get(Y).get(R).get(WSTRIDE).mul().add().set(YP);
    c.get(K0).eqz().if();
    {
      c.i32(0).set(J);
      c.block().loop();
      {
        c.get(YP).get(J).add().get(B).get(J).add().v128Load(0).v128Store(0);
        c.get(J).i32(16).add().tee(J).get(WSTRIDE).ltU().brIf(0);
      }
      c.end().end();
    }
    c.end();
    c.get(X).get(R).get(XSTRIDE).mul().add().get(K0).i32(4).mul().add().set(XP[0]);
    c.get(W).get(K0).get(WSTRIDE).mul().add().set(WP);
    c.get(KLEN).set(K);
    c.block().loop();
    {
      c.get(XP[0]).load32Splat(0).set(S);
      // for (J = 0; J < outP * 4; J += 64): 16 columns of y at YP + J from W at WP + J.
      c.i32(0).set(J);
      c.block().loop();
      {
        for (let q = 0; q < 4; q++) {
          c.get(YP).get(J).add();
          if (fused) c.get(S).get(WP).get(J).add().v128Load(16 * q).get(YP).get(J).add().v128Load(16 * q).f32x4RelaxedMadd();
          else c.get(YP).get(J).add().v128Load(16 * q).get(S).get(WP).get(J).add().v128Load(16 * q).f32x4Mul().f32x4Add();
          c.v128Store(16 * q);
        }
        c.get(J).i32(64).add().tee(J).get(WSTRIDE).ltU().brIf(0);
      }
      c.end().end();
      c.get(WP).get(WSTRIDE).add().set(WP);
      c.get(XP[0]).i32(4).add().set(XP[0]);
      c.get(K).i32(1).sub().tee(K).i32(0).ne().brIf(0);
    }
    c.end().end();
    c.get(RELU).get(LAST).and().if();
    {
      c.i32(0).set(J);
      c.block().loop();
      {
        c.get(YP).get(J).add().get(YP).get(J).add().v128Load(0).get(ZERO).f32x4Max().v128Store(0);
        c.get(J).i32(16).add().tee(J).get(WSTRIDE).ltU().brIf(0);
      }
      c.end().end();
    }
    c.end();
  };

  /** while (R + rows <= ROWS) { tile(rows); R += rows } */
  const rowLoop = (tileRows: number): void => {
    c.block().loop();
    {
      c.get(R).i32(tileRows).add().get(ROWS).gtU().brIf(1);
      tile(tileRows);
      c.get(R).i32(tileRows).add().set(R);
      c.br(0);
    }
    c.end().end();
  };

  // for (K0 = 0; K0 < nIn; K0 += KB), KLEN = min(KB, nIn - K0)
  c.i32(0).set(K0);
  c.block().loop();
  c.get(K0).get(NIN).geU().brIf(1);
  c.get(NIN).get(K0).sub().set(KLEN);
  c.get(KLEN).i32(KB).gtU().if();
  c.i32(KB).set(KLEN);
  c.end();
  c.get(K0).get(KLEN).add().get(NIN).geU().set(LAST);

  // Row tiles: for (J = 0; J < outP; J += 8) tiles of TILE_ROWS rows; TAIL = first row left over
  c.i32(0).set(J);
  c.i32(0).set(TAIL);
  c.block().loop();
  {
    c.get(J).get(OUTP).geU().brIf(1);
    c.i32(0).set(R);
    rowLoop(TILE_ROWS);
    c.get(R).set(TAIL);
    c.get(J).i32(8).add().set(J);
    c.br(0);
  }
  c.end().end();
  // The rows left over, one at a time: for (R = TAIL; R < rows; R++) rowStream()
  c.get(TAIL).set(R);
  c.block().loop();
  {
    c.get(R).get(ROWS).geU().brIf(1);
    rowStream();
    c.get(R).i32(1).add().set(R);
    c.br(0);
  }
  c.end().end();

  c.get(K0).i32(KB).add().set(K0);
  c.br(0);
  c.end().end();

  const locals = [...new Array<number>(i32Count).fill(I32), ...new Array<number>(v128Count).fill(V128)];
  return { name: 'dense', params: [I32, I32, I32, I32, I32, I32, I32, I32], locals, code: c };
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
  const validate = (): boolean => {
    try {
      return wasmApi().validate(bytes);
    } catch {
      return false;
    }
  };
  if (!validate()) {
    try {
      setFlagsFromString('--experimental-wasm-relaxed-simd');
    } catch {
      // No such flag on this runtime: the plain kernel serves.
    }
  }
  relaxedMadd = validate();
  return relaxedMadd;
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
