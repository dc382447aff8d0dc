/**
 * A hand-written WebAssembly SIMD kernel for one dense step: y = act(x·W + b), ReLU or linear
 * fused into the store. W is [nIn, outP] row-major with outP a multiple of 16 (padded with zero
 * columns), so every store is whole 128-bit lanes.
 *
 * Loop order (why): column blocks of 8 outer, rows inner. An 8-wide column panel of W is
 * nIn x 32 bytes (25 KiB for 784 inputs) and stays in L1 while every row block of the batch
 * streams past it; x (rows x nIn) stays in L2. Rows go 4 at a time: 4 x 8 outputs are 8 v128
 * accumulators, plus 2 weight vectors and a splat, which fits the 16 SIMD registers of x86-64.
 * Each output sums its products in ascending k after starting from the bias.
 */
import { Code, I32, V128, moduleBytes, type FunctionDef } from './wasm-emit.js';

// Parameters of dense(x, w, b, y, rows, nIn, outP, relu): byte addresses and counts.
const X = 0, W = 1, B = 2, Y = 3, ROWS = 4, NIN = 5, OUTP = 6, RELU = 7;
// Locals.
const R = 8, J = 9, K = 10, WP = 11, XP0 = 12, XP1 = 13, XP2 = 14, XP3 = 15, YP = 16, XSTRIDE = 17, WSTRIDE = 18;
const ACC = 19; // 8 v128 accumulators: ACC + 0..7
const W0 = 27, W1 = 28, S = 29, ZERO = 30;
// i32 locals after the v128 ones: start and length of the current k block, and whether it is the last.
const K0 = 31, KLEN = 32, LAST = 33;
/**
 * Inputs per k block. A block's W panel (KB x 8 floats for 4-row tiles, KB x 16 for single rows)
 * stays in L1 while the rows stream past; partial sums wait in y between blocks, which changes
 * nothing numerically (the accumulators are float32 either way) and keeps the order of k.
 */
const KB = 256;

function denseFunction(): FunctionDef {
  const c = new Code();
  // Strides in bytes.
  c.get(NIN).i32(4).mul().set(XSTRIDE);
  c.get(OUTP).i32(4).mul().set(WSTRIDE);
  c.v128Zero().set(ZERO);

  /** One tile of `tileRows` rows (1 or 4) x 8 columns at row R, column J. */
  const tile = (tileRows: number): void => {
    // Accumulators start at the bias in the first k block, else at the partial sums in y.
    c.get(Y).get(R).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().set(YP);
    c.get(K0).eqz().if();
    {
      c.get(B).get(J).i32(4).mul().add().set(WP); // WP reused briefly as the bias pointer
      c.get(WP).v128Load(0).set(ACC);
      c.get(WP).v128Load(16).set(ACC + 1);
      for (let t = 1; t < tileRows; t++) {
        c.get(ACC).set(ACC + 2 * t);
        c.get(ACC + 1).set(ACC + 2 * t + 1);
      }
    }
    c.else();
    {
      c.get(YP).set(WP);
      for (let t = 0; t < tileRows; t++) {
        c.get(WP).v128Load(0).set(ACC + 2 * t);
        c.get(WP).v128Load(16).set(ACC + 2 * t + 1);
        c.get(WP).get(WSTRIDE).add().set(WP);
      }
    }
    c.end();
    // Row pointers into x, at column K0.
    c.get(X).get(R).get(XSTRIDE).mul().add().get(K0).i32(4).mul().add().set(XP0);
    const xps = [XP0, XP1, XP2, XP3];
    for (let t = 1; t < tileRows; t++) c.get(xps[t - 1]).get(XSTRIDE).add().set(xps[t]);
    c.get(W).get(K0).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().set(WP);
    c.get(KLEN).set(K);
    c.block().loop();
    {
      c.get(WP).v128Load(0).set(W0);
      c.get(WP).v128Load(16).set(W1);
      for (let t = 0; t < tileRows; t++) {
        c.get(xps[t]).load32Splat(0).set(S);
        c.get(ACC + 2 * t).get(S).get(W0).f32x4Mul().f32x4Add().set(ACC + 2 * t);
        c.get(ACC + 2 * t + 1).get(S).get(W1).f32x4Mul().f32x4Add().set(ACC + 2 * t + 1);
        c.get(xps[t]).i32(4).add().set(xps[t]);
      }
      c.get(WP).get(WSTRIDE).add().set(WP);
      c.get(K).i32(1).sub().tee(K).i32(0).ne().brIf(0);
    }
    c.end().end();
    c.get(RELU).get(LAST).and().if();
    for (let a = 0; a < 2 * tileRows; a++) c.get(ACC + a).get(ZERO).f32x4Max().set(ACC + a);
    c.end();
    // Store: y[(R + t) * outP + J ...].
    for (let t = 0; t < tileRows; t++) {
      c.get(YP).get(ACC + 2 * t).v128Store(0);
      c.get(YP).get(ACC + 2 * t + 1).v128Store(16);
      if (t < tileRows - 1) c.get(YP).get(WSTRIDE).add().set(YP);
    }
  };

  /**
   * One row x 16 columns (a whole 64-byte line of W per k): a lone row has no row reuse, so
   * W's cache lines should be used whole. The sums run in ascending k from the bias, exactly as
   * in the 4-row tiles, so a row's answer never depends on which other rows share its batch
   * (a service gives the same answer alone or under load).
   */
  const rowTile = (): void => {
    c.get(K0).eqz().if();
    c.get(B).get(J).i32(4).mul().add().set(WP);
    c.else();
    c.get(Y).get(R).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().set(WP);
    c.end();
    for (let q = 0; q < 4; q++) c.get(WP).v128Load(16 * q).set(ACC + q);
    c.get(W).get(K0).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().set(WP);
    c.get(KLEN).set(K);
    c.get(X).get(R).get(XSTRIDE).mul().add().get(K0).i32(4).mul().add().set(XP0);
    c.block().loop();
    {
      c.get(XP0).load32Splat(0).set(S);
      for (let q = 0; q < 4; q++) c.get(ACC + q).get(S).get(WP).v128Load(16 * q).f32x4Mul().f32x4Add().set(ACC + q);
      c.get(WP).get(WSTRIDE).add().set(WP);
      c.get(XP0).i32(4).add().set(XP0);
      c.get(K).i32(1).sub().tee(K).i32(0).ne().brIf(0);
    }
    c.end().end();
    for (let q = 0; q < 4; q++) {
      c.get(RELU).get(LAST).and().if();
      c.get(ACC + q).get(ZERO).f32x4Max().set(ACC + q);
      c.end();
      c.get(Y).get(R).get(WSTRIDE).mul().add().get(J).i32(4).mul().add().get(ACC + q).v128Store(16 * q);
    }
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

  // Blocks of 4 rows: for (J = 0; J < outP; J += 8) for (R = 0; R + 4 <= rows; R += 4) tile(4)
  c.i32(0).set(J);
  c.block().loop();
  {
    c.get(J).get(OUTP).geU().brIf(1);
    c.i32(0).set(R);
    c.block().loop();
    {
      c.get(R).i32(4).add().get(ROWS).gtU().brIf(1);
      tile(4);
      c.get(R).i32(4).add().set(R);
      c.br(0);
    }
    c.end().end();
    c.get(J).i32(8).add().set(J);
    c.br(0);
  }
  c.end().end();
  // The last rows % 4 rows, one at a time: for (R = rows - rows % 4; R < rows; R++) for (J = 0; J < outP; J += 16)
  c.get(ROWS).get(ROWS).i32(3).and().sub().set(R);
  c.block().loop();
  {
    c.get(R).get(ROWS).geU().brIf(1);
    c.i32(0).set(J);
    c.block().loop();
    {
      c.get(J).get(OUTP).geU().brIf(1);
      rowTile();
      c.get(J).i32(16).add().set(J);
      c.br(0);
    }
    c.end().end();
    c.get(R).i32(1).add().set(R);
    c.br(0);
  }
  c.end().end();

  c.get(K0).i32(KB).add().set(K0);
  c.br(0);
  c.end().end();

  const locals = [...new Array<number>(WSTRIDE - R + 1).fill(I32), ...new Array<number>(8 + 4).fill(V128), I32, I32, I32];
  return { name: 'dense', params: [I32, I32, I32, I32, I32, I32, I32, I32], locals, code: c };
}

/** The little of the WebAssembly JS API used here (this project's TypeScript libs do not declare it). */
interface WasmMemory {
  readonly buffer: ArrayBuffer;
}
interface WasmApi {
  readonly Module: new (bytes: Uint8Array) => object;
  readonly Instance: new (module: object, imports: object) => { readonly exports: Record<string, unknown> };
}

/** The one typed adapter over the untyped global. */
function wasmApi(): WasmApi {
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

/** Compile the kernel with a memory of `bytes` (rounded up to 64 KiB pages). */
export function instantiateDenseKernel(bytes: number): DenseKernel {
  const pages = Math.max(1, Math.ceil(bytes / 65536));
  const wasm = wasmApi();
  const instance = new wasm.Instance(new wasm.Module(moduleBytes(pages, [denseFunction()])), {});
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
