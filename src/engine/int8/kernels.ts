/**
 * The integer micro-kernels, emitted as WebAssembly functions: activations quantised per row on
 * the fly, int8 weights times 6-bit activations summed in 32-bit integers, and dequantise + bias
 * + ReLU fused at the store. Three arithmetics give the same integers (so the same outputs, bit
 * for bit): two forms of the relaxed-SIMD i8 dot (16 multiply-adds per instruction) and the
 * standard i16 dot (8). The relaxed forms differ in how sums reach 32 bits:
 * - 'relaxed': i16x8.relaxed_dot_i8x16_i7x16_s, two steps added in 16 bits, then widened (a dot
 *   with ones) and added: 5 instructions per 32 multiply-adds on any x64 V8;
 * - 'relaxed-add': i32x4.relaxed_dot_i8x16_i7x16_add_s, 2 instructions per 32 multiply-adds where
 *   V8 lowers it to one AVX-VNNI vpdpbusd, but 3 or 4 x64 instructions each where it does not
 *   (measured on x64: V8 12.4 does not, 13.6 does; V8 11.3 gets it wrong and is refused; see
 *   `dotAddIsOneInstruction`).
 *
 * Activations (Jacob et al., CVPR 2018: real = scale · (q - zero)): per row, the range
 * [min(0, min x), max(0, max x)] maps onto the codes 0..63, scale = (max - min) / 63 and
 * zero = round(-min / scale), so 0 is exact and ReLU outputs (min 0) use all 63 steps. Codes stay
 * in [0, 127] because the relaxed dot is only deterministic when its second operand's bytes have
 * the top bit clear (relaxed-SIMD proposal); the i16 path uses the same codes so both agree.
 * Why 63 and not 127: the relaxed dot's 16-bit lanes then hold two steps' sums (see the bound),
 * so the loop widens to 32 bits once per 8 inputs instead of once per 4, the step that limits its
 * speed (measured on x64: about 1.3x the multiply-adds per second). The price, measured on the
 * Fashion-MNIST opt-in test: 0.14 points of accuracy against 0.05 with 127 codes, top class
 * agreeing on 99.62% of the test images against 99.68%.
 *
 * Weights: the int8 codes and per-output-column scales `shrink --store i8` writes (W ≈ code · ws).
 * A row's output column n is
 *     y = ((Σ_k q_k · code_kn) - zero · Σ_k code_kn) · scale · ws_n + b_n
 * with the integer part exact, then three float32 roundings (the conversion and two products)
 * and one for the bias: the JS twins below repeat exactly these steps, so kernel and twin agree
 * bit for bit; which rows share a batch never matters (integer sums have no order).
 *
 * Overflow bound (why MAX_INT8_INPUTS): a code lies in [-128, 127] (the writer never emits -128 but
 * a reader accepts it) and an activation code in [0, 63], so one product is at most
 * 128 · 63 = 8064 in magnitude; the relaxed loop adds four of them in a 16-bit lane (two dot
 * lanes of two products each, inputs 4g..4g+7), at most 32256 < 32767; a sum over K inputs is at
 * most 8064 · K. zero · Σ code is bounded the same way (zero <= 63, |Σ code| <= 128 K), and their
 * difference Σ (q - zero) · code too (|q - zero| <= 63). All three fit a signed 32-bit lane while
 * 8064 · K <= 2^31 - 1, that is K <= 266305; widths are padded to multiples of 16, so the widest
 * accepted layer has 266304 (padded) inputs. A wider layer is refused by the session, by name.
 */
import { Code, F32, I32, V128, moduleBytes, type FunctionDef } from '../fast/wasm-emit.js';
import { validatesWithRelaxedSimd, wasmApi } from '../fast/dense-kernel.js';
import { cpuFlags } from '../cpu-flags.js';

/** Widest (padded) input width whose int32 accumulators cannot overflow; see the bound above. */
export const MAX_INT8_INPUTS = 266304;

/**
 * The largest activation code: codes are 6-bit, 0..63, so that two relaxed i16 dot lanes (four
 * products of at most 63 · 128) can be added in 16 bits before widening (see the header).
 */
export const CODE_MAX = 63;

/** Which integer dot product a kernel is built on. */
export type Int8Arith = 'relaxed' | 'relaxed-add' | 'i16';

/** Bytes of one activation code in the quantised rows each arithmetic reads. */
export const CODE_BYTES: Readonly<Record<Int8Arith, number>> = { relaxed: 1, 'relaxed-add': 1, i16: 2 };

/**
 * Register tile: rows x (4 · COL_VECTORS) outputs. i16: 4 x 8 keeps 8 accumulators, 2 weight
 * vectors and a splat in registers. Relaxed: 2 x 8, its step holding 4 weight vectors (two
 * groups) and 2 splats; measured on x64 V8 11.3, 3 x 8 and 4 x 8 spill or schedule worse
 * (about 10% and 20% slower), whatever the emitted order. Relaxed-add: 4 x 8, its accumulators
 * taking the sums directly (measured on x64 V8 13.6 with AVX-VNNI: 4 x 8 about 100 G multiply-adds
 * per second in L1, 2 x 8 57, 3 x 8 80, 6 x 8 77, 8 x 4 94).
 */
export const TILE_ROWS: Readonly<Record<Int8Arith, number>> = { relaxed: 2, 'relaxed-add': 4, i16: 4 };
export const COL_VECTORS = 2;
/** Columns per weight panel. */
export const PANEL = 4 * COL_VECTORS;

class Locals {
  private next: number;
  readonly types: number[] = [];
  constructor(params: number) {
    this.next = params;
  }
  add(type: number): number {
    this.types.push(type);
    return this.next++;
  }
  many(type: number, n: number): number[] {
    return Array.from({ length: n }, () => this.add(type));
  }
}

/**
 * quantise(src, srcStride, rows, width, dst, dstStride, params): each row of `width` float32s
 * (a multiple of 16) becomes codes in [0, CODE_MAX] (one byte, or one i16 for the i16 arithmetic) at
 * dst, and (scale float32, zero int32) at params + 8 · row. A NaN anywhere in a row makes its
 * scale NaN, so every output of that row is NaN (never a finite guess).
 *
 * Cheap forms of the steps (quantisation is a tenth of a layer's time otherwise): the range with
 * pmin / pmax (one instruction each; a separate NaN flag, since they drop NaNs) and the rounding
 * by the float32 magic number 1.5 · 2^23: for |v| <= 256, v + 1.5 · 2^23 rounds v half to even
 * into the low mantissa bits, so bits(v + 1.5 · 2^23) - bits(1.5 · 2^23) + zero is round(v) + zero
 * as an int32. v = x · inv is clamped to [-256, 256] first (a NaN to -256); finite v never leaves
 * [-64, 64] except when 1 / scale overflows, and the clamp keeps the codes' 0..CODE_MAX cap the same.
 *
 * `fixed` (stored activation ranges): quantise_fixed(..., params, range) takes the layer's
 * (scale f32, 1/scale f32, zero i32) from `range` (see `fixedQuantParams`) instead of measuring
 * each row, so the range pass is skipped; values outside the range clamp to code 0 or CODE_MAX
 * (the ±256 clamp before rounding keeps any size of value from wrapping around). A row holding a
 * NaN or an infinity gets a NaN scale: clamping those would turn them into finite guesses.
 */
export function quantiseFunction(arith: Int8Arith, mode: 'row' | 'fixed' = 'row'): FunctionDef {
  const SRC = 0,
    SSTRIDE = 1,
    ROWS = 2,
    WIDTH = 3,
    DST = 4,
    DSTRIDE = 5,
    PARAMS = 6,
    RANGE = 7;
  const fixed = mode === 'fixed';
  const l = new Locals(fixed ? 8 : 7);
  const R = l.add(I32),
    C = l.add(I32),
    SP = l.add(I32),
    DP = l.add(I32),
    Z = l.add(I32);
  const MN = l.add(F32),
    MX = l.add(F32),
    S = l.add(F32),
    INV = l.add(F32);
  const VMIN = l.many(V128, 2),
    VMAX = l.many(V128, 2),
    VNAN = l.add(V128),
    V = l.add(V128),
    VINV = l.add(V128),
    VMZ = l.add(V128);
  const LO = l.add(V128),
    HI = l.add(V128),
    VLOW = l.add(V128),
    VHIGH = l.add(V128),
    VMAGIC = l.add(V128),
    T = l.add(V128);
  const c = new Code();
  c.f32(-256).f32x4Splat().set(VLOW);
  c.f32(256).f32x4Splat().set(VHIGH);
  c.f32(MAGIC).f32x4Splat().set(VMAGIC);
  if (fixed) {
    // One range for every row: its scale, reciprocal and zero point, splat once.
    c.get(RANGE).f32Load(0).set(S);
    c.get(RANGE).f32Load(4).set(INV);
    c.get(RANGE).i32Load(8).set(Z);
    c.get(INV).f32x4Splat().set(VINV);
    c.i32(MAGIC_BITS).get(Z).sub().i32x4Splat().set(VMZ);
  }
  c.i32(0).set(R);
  c.block().loop();
  {
    c.get(R).get(ROWS).geU().brIf(1);
    c.get(SRC).get(R).get(SSTRIDE).mul().add().set(SP);
    if (fixed) c.v128Zero().set(VNAN);
    else {
      emitRowRange(c, { SP, C, WIDTH, MN, MX, VMIN, VMAX, VNAN, V });
      // scale = (max - min) / CODE_MAX, or 1 for an all-zero row (any scale decodes zeros to zero).
      c.get(MX).get(MN).f32Sub().f32(CODE_MAX).f32Div().set(S);
      c.f32(1).get(S).get(S).f32(0).f32Eq().select().set(S);
      c.f32(1).get(S).f32Div().set(INV);
      c.get(MN).f32Neg().get(INV).f32Mul().f32Nearest().i32TruncSatF32().set(Z);
      c.get(PARAMS).get(R).i32(8).mul().add().set(DP);
      c.get(DP).get(S).f32Store(0);
      c.get(DP).get(Z).i32Store(4);
      c.get(INV).f32x4Splat().set(VINV);
      c.i32(MAGIC_BITS).get(Z).sub().i32x4Splat().set(VMZ);
    }
    // Pass 2: q = clamp(round(x · inv) + zero, 0, CODE_MAX), 16 values at a time.
    c.get(DST).get(R).get(DSTRIDE).mul().add().set(DP);
    c.i32(0).set(C);
    c.block().loop();
    {
      const quad = (offset: number): void => {
        if (fixed) {
          // x - x is NaN exactly for NaN and ±infinity: flag the row.
          c.get(SP).v128Load(offset).tee(V).get(V).f32x4Sub().set(T);
          c.get(VNAN).get(T).get(T).f32x4Ne().v128Or().set(VNAN);
          c.get(VHIGH).get(VLOW).get(V).get(VINV).f32x4Mul().f32x4Pmax().f32x4Pmin();
        } else c.get(VHIGH).get(VLOW).get(SP).v128Load(offset).get(VINV).f32x4Mul().f32x4Pmax().f32x4Pmin();
        c.get(VMAGIC).f32x4Add().get(VMZ).i32x4Sub();
      };
      quad(0);
      quad(16);
      c.i16x8NarrowI32x4S().set(LO);
      quad(32);
      quad(48);
      c.i16x8NarrowI32x4S().set(HI);
      if (CODE_BYTES[arith] === 1) {
        // Saturating narrow to [0, 255], then the CODE_MAX cap.
        c.get(DP).get(LO).get(HI).i8x16NarrowI16x8U().i32(CODE_MAX).i8x16Splat().i8x16MinU().v128Store(0);
        c.get(DP).i32(16).add().set(DP);
      } else {
        for (const [half, at] of [
          [LO, 0],
          [HI, 16],
        ] as const) {
          c.get(DP).get(half).i32(CODE_MAX).i16x8Splat().i16x8MinS().v128Zero().i16x8MaxS().v128Store(at);
        }
        c.get(DP).i32(32).add().set(DP);
      }
      c.get(SP).i32(64).add().set(SP);
      c.get(C).i32(16).add().tee(C).get(WIDTH).ltU().brIf(0);
    }
    c.end().end();
    if (fixed) {
      // The row's (scale, zero): the layer's, or a NaN scale when the row held a non-finite value.
      c.get(PARAMS).get(R).i32(8).mul().add().set(DP);
      c.get(DP).f32(Number.NaN).get(S).get(VNAN).v128AnyTrue().select().f32Store(0);
      c.get(DP).get(Z).i32Store(4);
    }
    c.get(R).i32(1).add().set(R);
    c.br(0);
  }
  c.end().end();
  return { name: fixed ? 'quantise_fixed' : 'quantise', params: new Array<number>(fixed ? 8 : 7).fill(I32), locals: l.types, code: c };
}

/** A stored range as the fixed quantiser reads it (scale, 1/scale, zero), in the per-row quantiser's float32 steps. */
export interface FixedQuant {
  readonly scale: number;
  readonly inv: number;
  readonly zero: number;
}

/**
 * The fixed quantisation of a stored range [min, max]: widened to include 0, then mapped onto the
 * codes 0..CODE_MAX exactly as a row with that range would be.
 * @example fixedQuantParams(0, 6.3) // { scale: 0.1 (float32), inv: 10, zero: 0 }
 */
export function fixedQuantParams(min: number, max: number): FixedQuant {
  const lo = Math.fround(Math.min(0, min));
  const hi = Math.fround(Math.max(0, max));
  let scale = Math.fround(Math.fround(hi - lo) / CODE_MAX);
  if (scale === 0) scale = 1;
  const inv = Math.fround(1 / scale);
  return { scale, inv, zero: roundHalfEven(Math.fround(-lo * inv)) + 0 };
}

/** The 12 bytes `quantise_fixed` reads at `range`. */
export function fixedQuantBytes(q: FixedQuant): Uint8Array {
  const bytes = new Uint8Array(16);
  const view = new DataView(bytes.buffer);
  view.setFloat32(0, q.scale, true);
  view.setFloat32(4, q.inv, true);
  view.setInt32(8, q.zero, true);
  return bytes;
}

/** Pass 1 of quantise: the range of the row at SP, widened to include 0, into MN and MX (both NaN when a lane is NaN). */
function emitRowRange(
  c: Code,
  l: { SP: number; C: number; WIDTH: number; MN: number; MX: number; VMIN: readonly number[]; VMAX: readonly number[]; VNAN: number; V: number },
): void {
  const { SP, C, WIDTH, MN, MX, VMIN, VMAX, VNAN, V } = l;
  // 16 values at a time on two chains; pmin / pmax drop NaNs, so a flag keeps them.
  for (const v of [...VMIN, ...VMAX, VNAN]) c.v128Zero().set(v);
  c.i32(0).set(C);
  c.block().loop();
  {
    for (let i = 0; i < 4; i++) {
      c.get(SP)
        .get(C)
        .add()
        .v128Load(16 * i)
        .set(V);
      c.get(VMIN[i & 1])
        .get(V)
        .f32x4Pmin()
        .set(VMIN[i & 1]);
      c.get(VMAX[i & 1])
        .get(V)
        .f32x4Pmax()
        .set(VMAX[i & 1]);
      c.get(VNAN).get(V).get(V).f32x4Ne().v128Or().set(VNAN);
    }
    c.get(C).i32(64).add().tee(C).get(WIDTH).i32(4).mul().ltU().brIf(0);
  }
  c.end().end();
  c.get(VMIN[0]).get(VMIN[1]).f32x4Pmin().set(V);
  reduceLanes(c, V, 'min');
  c.set(MN);
  c.get(VMAX[0]).get(VMAX[1]).f32x4Pmax().set(V);
  reduceLanes(c, V, 'max');
  c.set(MX);
  c.f32(Number.NaN).get(MN).get(VNAN).v128AnyTrue().select().set(MN);
}

/** 1.5 · 2^23 and its float32 bits: adding it rounds a float32 of magnitude <= 2^22 to an integer, half to even. */
const MAGIC = 12582912;
const MAGIC_BITS = 0x4b400000;

/** Push the min or max of v's four lanes. */
function reduceLanes(c: Code, v: number, which: 'min' | 'max'): void {
  const pick = (): Code => (which === 'min' ? c.f32Min() : c.f32Max());
  c.get(v).f32x4ExtractLane(0).get(v).f32x4ExtractLane(1);
  pick();
  c.get(v).f32x4ExtractLane(2).get(v).f32x4ExtractLane(3);
  pick();
  pick();
}

/** Parameters of denseI8, in order. */
const DENSE_I8_PARAMS = { X: 0, XSTRIDE: 1, P: 2, W: 3, CSUM: 4, WS: 5, B: 6, Y: 7, YSTRIDE: 8, ROWS: 9, GROUPS: 10, OUTP: 11, RELU: 12 } as const;

/** What the emitters of denseI8 share: the code, the arithmetic and tile shape, the local indices. */
interface DenseI8Emit {
  readonly c: Code;
  readonly arith: Int8Arith;
  readonly colVectors: number;
  /** Bytes of packed codes per group of 4 inputs of one panel, and of one row's 4 activation codes. */
  readonly groupBytes: number;
  readonly xGroupBytes: number;
  readonly l: {
    readonly R0: number;
    readonly J: number;
    readonly G: number;
    readonly WP: number;
    readonly WPANEL: number;
    readonly PANELBYTES: number;
    readonly YP: number;
    readonly PP: number;
    readonly XP: readonly number[];
    readonly ACC: readonly number[];
    readonly WV: readonly number[];
    readonly S: number;
    readonly S1: number;
    readonly ONES: number;
    readonly LOWER: number;
    readonly ZS: number;
    readonly SS: number;
  };
}

/**
 * denseI8(x, xStride, params, w, colSum, wScale, bias, y, yStride, rows, groups, outP, relu):
 * y[r, n] = act(((Σ_k q[r,k] · code[k,n]) - zero_r · colSum[n]) · scale_r · wScale[n] + bias[n])
 * over `rows` rows; K = 4 · groups inputs; outP a multiple of PANEL; w packed by `packInt8Weights`.
 * Column panels outer (a panel of codes stays in L1), rows inner in tiles of TILE_ROWS[arith].
 * K must be a multiple of 8 for the relaxed arithmetics (their step takes two groups); widths are
 * padded to 16.
 */
export function denseInt8Function(arith: Int8Arith, tileRows = TILE_ROWS[arith], colVectors = COL_VECTORS): FunctionDef {
  const { W, ROWS, GROUPS, OUTP, RELU } = DENSE_I8_PARAMS;
  const locals = new Locals(13);
  const R0 = locals.add(I32),
    J = locals.add(I32),
    G = locals.add(I32),
    WP = locals.add(I32),
    WPANEL = locals.add(I32),
    PANELBYTES = locals.add(I32),
    YP = locals.add(I32),
    PP = locals.add(I32);
  const XP = locals.many(I32, tileRows);
  // At least two rows of accumulators: a single row on the dot-add form uses two per column vector.
  const ACC = locals.many(V128, Math.max(tileRows, 2) * colVectors);
  const WV = locals.many(V128, 2 * colVectors);
  const S = locals.add(V128),
    S1 = locals.add(V128),
    ONES = locals.add(V128),
    LOWER = locals.add(V128),
    ZS = locals.add(V128),
    SS = locals.add(V128);
  const c = new Code();
  const groupBytes = 16 * colVectors * CODE_BYTES[arith];
  const xGroupBytes = 4 * CODE_BYTES[arith];
  const l = { R0, J, G, WP, WPANEL, PANELBYTES, YP, PP, XP, ACC, WV, S, S1, ONES, LOWER, ZS, SS };
  const e: DenseI8Emit = { c, arith, colVectors, groupBytes, xGroupBytes, l };

  // ReLU as max(v, 0); "no activation" as max(v, -inf), which changes nothing (NaN stays NaN).
  c.f32(0).f32(-Infinity).get(RELU).select().f32x4Splat().set(LOWER);
  c.i32(1).i16x8Splat().set(ONES);
  c.get(GROUPS).i32(groupBytes).mul().set(PANELBYTES);

  // for (J = 0; J < outP; J += PANEL, WPANEL += PANELBYTES)
  c.i32(0).set(J);
  c.get(W).set(WPANEL);
  c.block().loop();
  {
    c.get(J).get(OUTP).geU().brIf(1);
    c.i32(0).set(R0);
    // Whole tiles, then the rows left over one at a time (same integers, so the same outputs).
    c.block().loop();
    {
      c.get(R0).i32(tileRows).add().get(ROWS).gtU().brIf(1);
      emitInt8Tile(e, tileRows);
      c.get(R0).i32(tileRows).add().set(R0);
      c.br(0);
    }
    c.end().end();
    c.block().loop();
    {
      c.get(R0).get(ROWS).geU().brIf(1);
      emitInt8Tile(e, 1);
      c.get(R0).i32(1).add().set(R0);
      c.br(0);
    }
    c.end().end();
    c.get(J)
      .i32(4 * colVectors)
      .add()
      .set(J);
    c.get(WPANEL).get(PANELBYTES).add().set(WPANEL);
    c.br(0);
  }
  c.end().end();
  return { name: 'dense_i8', params: new Array<number>(13).fill(I32), locals: locals.types, code: c };
}

/** One tile of `rows` rows x one panel at row R0, column J: the integer sums over all groups, then the epilogue. */
function emitInt8Tile(e: DenseI8Emit, rows: number): void {
  const { X, XSTRIDE, GROUPS } = DENSE_I8_PARAMS;
  const { c, colVectors, groupBytes, xGroupBytes } = e;
  const { R0, G, WP, WPANEL, XP, ACC } = e.l;
  // A single row on the dot-add form keeps its two groups' sums apart (two chains per column
  // vector instead of one chain of dependent dot-adds), added before the epilogue.
  const split = splitChains(e, rows);
  for (let a = 0; a < rows * colVectors * (split ? 2 : 1); a++) c.v128Zero().set(ACC[a]);
  c.get(X).get(R0).get(XSTRIDE).mul().add().set(XP[0]);
  for (let t = 1; t < rows; t++)
    c.get(XP[t - 1])
      .get(XSTRIDE)
      .add()
      .set(XP[t]);
  c.get(WPANEL).set(WP);
  c.get(GROUPS).set(G);
  // The relaxed loops take two groups per step (their i16 sums added before widening, or two
  // dot-adds on each accumulator), the i16 loop one.
  const step = CODE_BYTES[e.arith] === 1 ? 2 : 1;
  c.block().loop();
  {
    emitInt8GroupProducts(e, rows);
    for (let t = 0; t < rows; t++)
      c.get(XP[t])
        .i32(step * xGroupBytes)
        .add()
        .set(XP[t]);
    c.get(WP)
      .i32(step * groupBytes)
      .add()
      .set(WP);
    c.get(G).i32(step).sub().tee(G).i32(0).ne().brIf(0);
  }
  c.end().end();
  if (split)
    for (let v = 0; v < colVectors; v++)
      c.get(ACC[v])
        .get(ACC[colVectors + v])
        .i32x4Add()
        .set(ACC[v]);
  emitInt8Epilogue(e, rows);
}

/** Whether a tile of `rows` rows keeps two accumulators per column vector (see emitInt8Tile). */
function splitChains(e: Pick<DenseI8Emit, 'arith' | 'colVectors'>, rows: number): boolean {
  return e.arith === 'relaxed-add' && rows === 1;
}

/**
 * The dot products of one step into the tile's accumulators. Relaxed: two groups of 4 inputs,
 * g and g + 1; per i16 lane dot(g) + dot(g + 1) = four products of at most 63 · 128, so at most
 * 32256 < 32767, then widened once. i16: one group, as two halves of 2 inputs.
 */
function emitInt8GroupProducts({ c, arith, colVectors, groupBytes, l }: DenseI8Emit, rows: number): void {
  const { WP, XP, ACC, WV, S, S1, ONES } = l;
  if (CODE_BYTES[arith] === 1) {
    // Both groups' weight vectors stay in registers; each row's two splats are used at once.
    const W0 = WV.slice(0, colVectors);
    const W1 = WV.slice(colVectors);
    for (let v = 0; v < colVectors; v++) {
      c.get(WP)
        .v128Load(16 * v)
        .set(W0[v]);
      c.get(WP)
        .v128Load(groupBytes + 16 * v)
        .set(W1[v]);
    }
    for (let t = 0; t < rows; t++) {
      c.get(XP[t]).load32Splat(0).set(S);
      c.get(XP[t]).load32Splat(4).set(S1);
      for (let v = 0; v < colVectors; v++) {
        const acc = ACC[t * colVectors + v];
        if (arith === 'relaxed-add') {
          // Each group's four products per lane go straight into the 32-bit sums.
          if (splitChains({ arith, colVectors }, rows)) {
            c.get(W0[v]).get(S).get(acc).i32x4RelaxedDotI8x16I7x16AddS().set(acc);
            c.get(W1[v])
              .get(S1)
              .get(ACC[colVectors + v])
              .i32x4RelaxedDotI8x16I7x16AddS()
              .set(ACC[colVectors + v]);
          } else c.get(W1[v]).get(S1).get(W0[v]).get(S).get(acc).i32x4RelaxedDotI8x16I7x16AddS().i32x4RelaxedDotI8x16I7x16AddS().set(acc);
          continue;
        }
        c.get(acc).get(W0[v]).get(S).i16x8RelaxedDotI8x16I7x16S().get(W1[v]).get(S1).i16x8RelaxedDotI8x16I7x16S();
        // Widened as a dot with ones held in a register (V8 11.3 lowers extadd_pairwise to the same
        // pmaddwd, but against a constant it reloads through a scalar register every time).
        c.i16x8Add().get(ONES).i32x4DotI16x8S().i32x4Add().set(acc);
      }
    }
  } else {
    for (let h = 0; h < 2; h++) {
      for (let v = 0; v < colVectors; v++)
        c.get(WP)
          .v128Load(16 * (colVectors * h + v))
          .set(WV[v]);
      for (let t = 0; t < rows; t++) {
        c.get(XP[t])
          .load32Splat(4 * h)
          .set(S);
        for (let v = 0; v < colVectors; v++) {
          const acc = ACC[t * colVectors + v];
          c.get(acc).get(WV[v]).get(S).i32x4DotI16x8S().i32x4Add().set(acc);
        }
      }
    }
  }
}

/** Epilogue: zero-point correction, dequantise, bias, activation, store. */
function emitInt8Epilogue({ c, colVectors, l }: DenseI8Emit, rows: number): void {
  const { P, CSUM, WS, B, Y, YSTRIDE } = DENSE_I8_PARAMS;
  const { R0, J, YP, PP, ACC, S, LOWER, ZS, SS } = l;
  for (let t = 0; t < rows; t++) {
    c.get(P).get(R0).i32(t).add().i32(8).mul().add().set(PP);
    c.get(PP).load32Splat(4).set(ZS);
    c.get(PP).load32Splat(0).set(SS);
    c.get(Y).get(R0).i32(t).add().get(YSTRIDE).mul().add().get(J).i32(4).mul().add().set(YP);
    for (let v = 0; v < colVectors; v++) {
      c.get(ACC[t * colVectors + v])
        .get(ZS)
        .get(CSUM)
        .get(J)
        .i32(4)
        .mul()
        .add()
        .v128Load(16 * v)
        .i32x4Mul()
        .i32x4Sub();
      c.f32x4ConvertI32x4().get(SS).f32x4Mul();
      c.get(WS)
        .get(J)
        .i32(4)
        .mul()
        .add()
        .v128Load(16 * v)
        .f32x4Mul();
      c.get(B)
        .get(J)
        .i32(4)
        .mul()
        .add()
        .v128Load(16 * v)
        .f32x4Add();
      c.get(LOWER).f32x4Max();
      c.set(S);
      c.get(YP)
        .get(S)
        .v128Store(16 * v);
    }
  }
}

/**
 * affine(x, stride, rows, width, scale, shift): in place over `width` floats (a multiple of 4) of
 * each row. `order` 'scale-shift' is x · scale + shift (batch normalisation folded);
 * 'shift-scale' is (x - shift) · scale (the model's input normalisation, as the fast engine does it).
 */
export function affineFunction(name: string, order: 'scale-shift' | 'shift-scale'): FunctionDef {
  const X = 0,
    STRIDE = 1,
    ROWS = 2,
    WIDTH = 3,
    SCALE = 4,
    SHIFT = 5;
  const l = new Locals(6);
  const R = l.add(I32),
    C = l.add(I32),
    XP = l.add(I32);
  const c = new Code();
  c.i32(0).set(R);
  c.block().loop();
  {
    c.get(R).get(ROWS).geU().brIf(1);
    c.get(X).get(R).get(STRIDE).mul().add().set(XP);
    c.i32(0).set(C);
    c.block().loop();
    {
      c.get(XP).get(C).add();
      if (order === 'scale-shift') {
        c.get(XP).get(C).add().v128Load(0).get(SCALE).get(C).add().v128Load(0).f32x4Mul().get(SHIFT).get(C).add().v128Load(0).f32x4Add();
      } else {
        c.get(XP).get(C).add().v128Load(0).get(SHIFT).get(C).add().v128Load(0).f32x4Sub().get(SCALE).get(C).add().v128Load(0).f32x4Mul();
      }
      c.v128Store(0);
      c.get(C).i32(16).add().tee(C).get(WIDTH).i32(4).mul().ltU().brIf(0);
    }
    c.end().end();
    c.get(R).i32(1).add().set(R);
    c.br(0);
  }
  c.end().end();
  return { name, params: new Array<number>(6).fill(I32), locals: l.types, code: c };
}

// ---------------------------------------------------------------------------------------------
// Weight packing.

/**
 * Pack a layer's codes (row-major [inputs, units]) for `denseInt8Function`, padded with zero codes
 * to [kP, nP] (kP a multiple of 4, nP of PANEL). Panel p holds columns p·PANEL.. and, per group of
 * 4 inputs, COL_VECTORS vectors of 4 columns:
 * - relaxed and relaxed-add: 16 bytes per vector, column j's 4 codes for inputs 4g..4g+3 in bytes 4j..4j+3 (one
 *   i32 lane of the dot);
 * - i16: two halves per group (inputs 4g+2h, +1), 8 i16 per vector, column j's pair in lanes 2j, 2j+1.
 */
export function packInt8Weights(
  codes: Int8Array,
  inputs: number,
  units: number,
  kP: number,
  nP: number,
  arith: Int8Arith,
  colVectors = COL_VECTORS,
): Uint8Array {
  const groups = kP / 4;
  const panel = 4 * colVectors;
  const panels = nP / panel;
  const code = (k: number, n: number): number => (k < inputs && n < units ? codes[k * units + n] : 0);
  if (CODE_BYTES[arith] === 1) {
    const out = new Int8Array(kP * nP);
    for (let p = 0; p < panels; p++)
      for (let g = 0; g < groups; g++)
        for (let v = 0; v < colVectors; v++)
          for (let j = 0; j < 4; j++)
            for (let i = 0; i < 4; i++) out[((p * groups + g) * colVectors + v) * 16 + j * 4 + i] = code(4 * g + i, p * panel + 4 * v + j);
    return new Uint8Array(out.buffer);
  }
  const out = new Int16Array(kP * nP);
  for (let p = 0; p < panels; p++)
    for (let g = 0; g < groups; g++)
      for (let h = 0; h < 2; h++)
        for (let v = 0; v < colVectors; v++)
          for (let j = 0; j < 4; j++)
            for (let i = 0; i < 2; i++) out[(((p * groups + g) * 2 + h) * colVectors + v) * 8 + j * 2 + i] = code(4 * g + 2 * h + i, p * panel + 4 * v + j);
  return new Uint8Array(out.buffer);
}

/** Σ_k code[k, n] per column, padded with zeros to nP (the zero-point correction's factor). */
export function columnSums(codes: Int8Array, inputs: number, units: number, nP: number): Int32Array {
  const sums = new Int32Array(nP);
  for (let k = 0; k < inputs; k++) for (let n = 0; n < units; n++) sums[n] += codes[k * units + n];
  return sums;
}

// ---------------------------------------------------------------------------------------------
// Plain JavaScript twins: the same steps, one value at a time, on unpacked codes.

/** Round half to even, as f32.nearest does. */
export function roundHalfEven(x: number): number {
  const r = Math.round(x);
  return Math.abs(x - Math.trunc(x)) === 0.5 && r % 2 !== 0 ? r - 1 : r;
}

/** Twin of `quantiseFunction` for one row: codes and (scale, zero), in float32 steps. */
export function quantiseRowPlain(x: ArrayLike<number>): { codes: Uint8Array; scale: number; zero: number } {
  let mn = 0;
  let mx = 0;
  for (let i = 0; i < x.length; i++) {
    const v = x[i];
    if (Number.isNaN(v)) mn = mx = Number.NaN;
    else if (!Number.isNaN(mn)) {
      mn = Math.min(mn, v);
      mx = Math.max(mx, v);
    }
  }
  let scale = Math.fround(Math.fround(mx - mn) / CODE_MAX);
  if (scale === 0) scale = 1;
  const inv = Math.fround(1 / scale);
  const zeroF = roundHalfEven(Math.fround(-mn * inv));
  // i32.trunc_sat: NaN to 0, beyond the int32 range to its bounds; + 0: an integer register has no -0.
  const zero = Number.isNaN(zeroF) ? 0 : Math.min(Math.max(zeroF, -(2 ** 31)), 2 ** 31 - 1) + 0;
  const codes = new Uint8Array(x.length);
  for (let i = 0; i < x.length; i++) {
    const v = Math.fround(x[i] * inv);
    const q = roundHalfEven(Number.isNaN(v) ? -256 : Math.min(Math.max(v, -256), 256));
    codes[i] = Math.min(Math.max((q + zero) | 0, 0), CODE_MAX);
  }
  return { codes, scale, zero };
}

/**
 * Twin of `quantiseFunction(arith, 'fixed')` for one row: the stored range's codes (clamped to
 * [0, CODE_MAX]) and its scale, NaN when the row holds a NaN or an infinity.
 */
export function quantiseRowFixedPlain(x: ArrayLike<number>, q: FixedQuant): { codes: Uint8Array; scale: number; zero: number } {
  const codes = new Uint8Array(x.length);
  let finite = true;
  for (let i = 0; i < x.length; i++) {
    if (!Number.isFinite(x[i])) finite = false;
    const v = Math.fround(x[i] * q.inv);
    const r = roundHalfEven(Number.isNaN(v) ? -256 : Math.min(Math.max(v, -256), 256));
    codes[i] = Math.min(Math.max((r + q.zero) | 0, 0), CODE_MAX);
  }
  return { codes, scale: finite ? q.scale : Number.NaN, zero: q.zero };
}

/**
 * Twin of `denseInt8Function` for one row against unpacked codes [inputs, units]: the integer sum
 * exactly (in float64, far below 2^53), then the kernel's float32 roundings in its order.
 */
export function denseInt8RowPlain(
  q: ArrayLike<number>,
  scale: number,
  zero: number,
  codes: Int8Array,
  wScale: Float32Array,
  bias: Float32Array,
  inputs: number,
  units: number,
  relu: boolean,
): Float32Array {
  const y = new Float32Array(units);
  for (let n = 0; n < units; n++) {
    let acc = 0;
    let colSum = 0;
    for (let k = 0; k < inputs; k++) {
      acc += q[k] * codes[k * units + n];
      colSum += codes[k * units + n];
    }
    const v = Math.fround(acc - zero * colSum);
    const z = Math.fround(Math.fround(Math.fround(v * scale) * wScale[n]) + bias[n]);
    y[n] = relu ? (Number.isNaN(z) ? z : Math.max(z, 0)) : z;
  }
  return y;
}

// ---------------------------------------------------------------------------------------------
// Which integer dot product this runtime validates.

let relaxedDot: boolean | null = null;

/**
 * Whether the relaxed i8 dot validates here and gives the right answers. Node 20's V8 has relaxed
 * SIMD behind a flag, switched on first (process-wide).
 */
export function relaxedDotAvailable(): boolean {
  if (relaxedDot !== null) return relaxedDot;
  // probe(at): the relaxed step on the vectors at at, at + 16 and accumulator at + 32, stored at at + 48.
  const code = new Code().get(0).get(0).v128Load(32).get(0).v128Load(0).get(0).v128Load(16);
  code.i16x8RelaxedDotI8x16I7x16S().i32x4ExtaddPairwiseI16x8S().i32x4Add().v128Store(48);
  const bytes = moduleBytes(1, [{ name: 'probe', params: [I32], locals: [], code }]);
  relaxedDot = validatesWithRelaxedSimd(bytes) && knownAnswer(bytes);
  return relaxedDot;
}

let relaxedDotAdd: boolean | null = null;

/** Whether i32x4.relaxed_dot_i8x16_i7x16_add_s validates here and gives the right answers. */
export function relaxedDotAddAvailable(): boolean {
  if (relaxedDotAdd !== null) return relaxedDotAdd;
  // probe(at): the dot-add on the vectors at at, at + 16 and accumulator at + 32, stored at at + 48.
  const code = new Code().get(0).get(0).v128Load(0).get(0).v128Load(16).get(0).v128Load(32);
  code.i32x4RelaxedDotI8x16I7x16AddS().v128Store(48);
  const bytes = moduleBytes(1, [{ name: 'probe', params: [I32], locals: [], code }]);
  relaxedDotAdd = validatesWithRelaxedSimd(bytes) && knownAnswer(bytes);
  return relaxedDotAdd;
}

/**
 * Whether this V8 lowers i32x4.relaxed_dot_i8x16_i7x16_add_s to one instruction, the only case
 * where 'relaxed-add' beats 'relaxed': x64 with AVX-VNNI (Linux lists it as avx_vnni) and V8 13.6
 * or later. Measured on one AMD EPYC with AVX-VNNI, G multiply-adds per second of the inner loop in
 * L1, relaxed against relaxed-add: V8 12.4 (Node 22) 71 against 44; V8 13.6 (Node 24) 64-69
 * against 100. V8 11.3 (Node 20) validates the dot-add but gives wrong sums (twice the dot, no
 * accumulator, on the probe), which `relaxedDotAddAvailable`'s known answer catches. Anywhere this cannot be
 * told, 'relaxed' runs.
 */
export function dotAddIsOneInstruction(v8Version = process.versions.v8, arch: string = process.arch, flags: () => ReadonlySet<string> = cpuFlags): boolean {
  const [major, minor] = v8Version.split('.').map(Number);
  if (arch !== 'x64' || !(major > 13 || (major === 13 && minor >= 6))) return false;
  return flags().has('avx_vnni');
}

/** The relaxed step gives the exact sums on extreme and mixed codes (a wrong lowering is refused, not trusted). */
function knownAnswer(bytes: Uint8Array): boolean {
  try {
    const wasm = wasmApi();
    const e = new wasm.Instance(new wasm.Module(bytes), {}).exports;
    const memory = e.memory as { buffer: ArrayBuffer };
    const probe = e.probe as (at: number) => void;
    const a = Int8Array.from({ length: 16 }, (_, i) => [-128, 127, -5, 100, -128, -128, 127, 127][i % 8]);
    const b = Uint8Array.from({ length: 16 }, (_, i) => [127, 127, 64, 1, 127, 127, 127, 127, 0, 3][i % 10]);
    const c = Int32Array.of(1000, -7, 0, 2 ** 30);
    new Int8Array(memory.buffer).set(a, 0);
    new Uint8Array(memory.buffer).set(b, 16);
    new Int32Array(memory.buffer).set(c, 8);
    probe(0);
    const got = new Int32Array(memory.buffer, 48, 4);
    for (let j = 0; j < 4; j++) {
      let want = c[j];
      for (let i = 0; i < 4; i++) want += a[4 * j + i] * b[4 * j + i];
      if (got[j] !== want) return false;
    }
    return true;
  } catch {
    return false;
  }
}

/** Whether the standard i32x4.dot_i16x8_s validates (any runtime with fixed-width SIMD). */
export function i16DotAvailable(): boolean {
  const probe = new Code().get(0).get(1).i32x4DotI16x8S();
  try {
    return wasmApi().validate(moduleBytes(1, [{ name: 'probe', params: [V128, V128], results: [V128], locals: [], code: probe }]));
  } catch {
    return false;
  }
}

/** Every integer arithmetic that validates and answers right here (tests and the bench run each). */
export function availableInt8Ariths(): Int8Arith[] {
  const all: Int8Arith[] = [];
  if (relaxedDotAvailable()) all.push('relaxed');
  if (relaxedDotAddAvailable()) all.push('relaxed-add');
  if (i16DotAvailable()) all.push('i16');
  return all;
}

/** The integer arithmetic to use here, best first; null when WebAssembly SIMD is missing. */
export function bestInt8Arith(): Int8Arith | null {
  if (relaxedDotAvailable()) return relaxedDotAddAvailable() && dotAddIsOneInstruction() ? 'relaxed-add' : 'relaxed';
  return i16DotAvailable() ? 'i16' : null;
}

/** What users see for each arithmetic. */
export const INT8_KERNEL_NAMES: Readonly<Record<Int8Arith, string>> = {
  relaxed: 'relaxed i8 dot, i16x8.relaxed_dot_i8x16_i7x16_s',
  'relaxed-add': 'relaxed i8 dot-add, i32x4.relaxed_dot_i8x16_i7x16_add_s',
  i16: 'i16 dot, i32x4.dot_i16x8_s',
};
