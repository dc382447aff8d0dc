/**
 * A tiny WebAssembly binary writer: just the sections and instructions the fast dense kernel
 * needs (i32 arithmetic, loops, v128 loads/stores and f32x4 arithmetic). Opcodes follow the
 * WebAssembly core specification 2.0 (binary format) and the fixed-width SIMD proposal.
 */

export const I32 = 0x7f;
export const F32 = 0x7d;
export const V128 = 0x7b;

/** Unsigned LEB128. */
export function uleb(value: number): number[] {
  const out: number[] = [];
  let v = value >>> 0;
  do {
    let byte = v & 0x7f;
    v >>>= 7;
    if (v !== 0) byte |= 0x80;
    out.push(byte);
  } while (v !== 0);
  return out;
}

/** Signed LEB128 for 32-bit values. */
export function sleb(value: number): number[] {
  const out: number[] = [];
  let v = value | 0;
  for (;;) {
    const byte = v & 0x7f;
    v >>= 7;
    const done = (v === 0 && (byte & 0x40) === 0) || (v === -1 && (byte & 0x40) !== 0);
    out.push(done ? byte : byte | 0x80);
    if (done) return out;
  }
}

const SIMD = 0xfd;

/** Instruction bytes for one function body; each method appends and returns `this`. */
export class Code {
  readonly bytes: number[] = [];

  private op(...b: number[]): this {
    this.bytes.push(...b);
    return this;
  }
  private simd(opcode: number, ...rest: number[]): this {
    return this.op(SIMD, ...uleb(opcode), ...rest);
  }

  get(local: number): this {
    return this.op(0x20, ...uleb(local));
  }
  set(local: number): this {
    return this.op(0x21, ...uleb(local));
  }
  tee(local: number): this {
    return this.op(0x22, ...uleb(local));
  }
  i32(value: number): this {
    return this.op(0x41, ...sleb(value));
  }
  add(): this {
    return this.op(0x6a);
  }
  sub(): this {
    return this.op(0x6b);
  }
  mul(): this {
    return this.op(0x6c);
  }
  /** i32.ge_u */
  geU(): this {
    return this.op(0x4f);
  }
  /** i32.eqz */
  eqz(): this {
    return this.op(0x45);
  }
  /** i32.lt_u */
  ltU(): this {
    return this.op(0x49);
  }
  /** i32.gt_u */
  gtU(): this {
    return this.op(0x4b);
  }
  /** i32.ne */
  ne(): this {
    return this.op(0x47);
  }
  /** i32.and */
  and(): this {
    return this.op(0x71);
  }
  else(): this {
    return this.op(0x05);
  }
  block(): this {
    return this.op(0x02, 0x40);
  }
  loop(): this {
    return this.op(0x03, 0x40);
  }
  if(): this {
    return this.op(0x04, 0x40);
  }
  end(): this {
    return this.op(0x0b);
  }
  br(depth: number): this {
    return this.op(0x0c, ...uleb(depth));
  }
  brIf(depth: number): this {
    return this.op(0x0d, ...uleb(depth));
  }
  /** v128.load with a constant byte offset; alignment hint 4 bytes (the arrays are f32-aligned). */
  v128Load(offset = 0): this {
    return this.simd(0x00, 2, ...uleb(offset));
  }
  v128Store(offset = 0): this {
    return this.simd(0x0b, 2, ...uleb(offset));
  }
  /** v128.load32_splat: one f32 from memory into all four lanes. */
  load32Splat(offset = 0): this {
    return this.simd(0x09, 2, ...uleb(offset));
  }
  v128Zero(): this {
    return this.simd(0x0c, ...new Array<number>(16).fill(0));
  }
  f32x4Add(): this {
    return this.simd(0xe4);
  }
  f32x4Mul(): this {
    return this.simd(0xe6);
  }
  /**
   * f32x4.relaxed_madd (relaxed-SIMD proposal, opcode 0xfd 0x105): a·b + c from the stack order
   * a, b, c. Fused into one rounding where the CPU has FMA, else multiply then add; the choice is
   * fixed per machine, so results are repeatable on it.
   */
  f32x4RelaxedMadd(): this {
    return this.simd(0x105);
  }
  /** f32x4.max: NaN in, NaN out, like a scalar max. */
  f32x4Max(): this {
    return this.simd(0xe9);
  }

  // What the integer kernels and the shared-memory plans add (same specification, same proposal).
  /** call of function `index` (module order). */
  call(index: number): this {
    return this.op(0x10, ...uleb(index));
  }
  f32(value: number): this {
    const b = new Uint8Array(new Float32Array([value]).buffer);
    return this.op(0x43, ...b);
  }
  /** f32.load / f32.store with a constant byte offset, alignment 4. */
  f32Load(offset = 0): this {
    return this.op(0x2a, 2, ...uleb(offset));
  }
  f32Store(offset = 0): this {
    return this.op(0x38, 2, ...uleb(offset));
  }
  i32Store(offset = 0): this {
    return this.op(0x36, 2, ...uleb(offset));
  }
  i32Load(offset = 0): this {
    return this.op(0x28, 2, ...uleb(offset));
  }
  f32Sub(): this {
    return this.op(0x93);
  }
  f32Mul(): this {
    return this.op(0x94);
  }
  f32Div(): this {
    return this.op(0x95);
  }
  f32Min(): this {
    return this.op(0x96);
  }
  f32Max(): this {
    return this.op(0x97);
  }
  f32Neg(): this {
    return this.op(0x8c);
  }
  /** f32.nearest: round half to even. */
  f32Nearest(): this {
    return this.op(0x90);
  }
  f32Eq(): this {
    return this.op(0x5b);
  }
  /** i32.trunc_sat_f32_s (0xfc 0): NaN to 0, out of range to the nearest bound. */
  i32TruncSatF32(): this {
    return this.op(0xfc, 0x00);
  }
  select(): this {
    return this.op(0x1b);
  }
  f32x4Splat(): this {
    return this.simd(0x13);
  }
  i32x4Splat(): this {
    return this.simd(0x11);
  }
  i8x16Splat(): this {
    return this.simd(0x0f);
  }
  i16x8Splat(): this {
    return this.simd(0x10);
  }
  f32x4ExtractLane(lane: number): this {
    return this.simd(0x1f, lane);
  }
  f32x4Sub(): this {
    return this.simd(0xe5);
  }
  f32x4Min(): this {
    return this.simd(0xe8);
  }
  /** f32x4.ne: all ones in a lane that differs (a NaN differs from itself). */
  f32x4Ne(): this {
    return this.simd(0x42);
  }
  v128Or(): this {
    return this.simd(0x50);
  }
  /** v128.any_true: 1 when any bit is set. */
  v128AnyTrue(): this {
    return this.simd(0x53);
  }
  /** f32x4.nearest: round half to even, lane-wise. */
  f32x4Nearest(): this {
    return this.simd(0x6a);
  }
  /** i32x4.trunc_sat_f32x4_s. */
  i32x4TruncSatF32x4(): this {
    return this.simd(0xf8);
  }
  /** f32x4.convert_i32x4_s: rounds to nearest float32 beyond 2^24. */
  f32x4ConvertI32x4(): this {
    return this.simd(0xfa);
  }
  i32x4Add(): this {
    return this.simd(0xae);
  }
  i32x4Sub(): this {
    return this.simd(0xb1);
  }
  i32x4Mul(): this {
    return this.simd(0xb5);
  }
  /** i16x8.narrow_i32x4_s: saturating. */
  i16x8NarrowI32x4S(): this {
    return this.simd(0x85);
  }
  /** i8x16.narrow_i16x8_u: saturating to [0, 255]. */
  i8x16NarrowI16x8U(): this {
    return this.simd(0x66);
  }
  /** i8x16.min_u. */
  i8x16MinU(): this {
    return this.simd(0x77);
  }
  /** i16x8.add_sat_s: saturating to [-32768, 32767]. */
  i16x8AddSatS(): this {
    return this.simd(0x8f);
  }
  /** i16x8.min_s. */
  i16x8MinS(): this {
    return this.simd(0x96);
  }
  /** i16x8.max_s. */
  i16x8MaxS(): this {
    return this.simd(0x98);
  }
  /**
   * i32x4.dot_i16x8_s (fixed-width SIMD): lane j = a[2j]·b[2j] + a[2j+1]·b[2j+1], exact in 32 bits
   * (only -32768·-32768·2 wraps, which int8 codes never reach).
   */
  i32x4DotI16x8S(): this {
    return this.simd(0xba);
  }
  /**
   * i32x4.relaxed_dot_i8x16_i7x16_add_s (relaxed-SIMD proposal, 0xfd 0x113) from the stack order
   * a, b, c: lane j = c[j] + Σ_{i<4} a[4j+i]·b[4j+i], a signed bytes. Deterministic only when
   * every byte of b has its top bit clear (b in [0, 127]): the bytes of b may be read as signed
   * or unsigned, which agree there, and two products then stay inside 16 bits on every lowering.
   */
  i32x4RelaxedDotI8x16I7x16AddS(): this {
    return this.simd(0x113);
  }
  /**
   * i16x8.relaxed_dot_i8x16_i7x16_s (relaxed SIMD, 0xfd 0x112): lane j = a[2j]·b[2j] + a[2j+1]·b[2j+1],
   * with the same condition on b as the i32 form above.
   */
  i16x8RelaxedDotI8x16I7x16S(): this {
    return this.simd(0x112);
  }
  /** i32x4.extadd_pairwise_i16x8_s: lane j = a[2j] + a[2j+1], widened. */
  i32x4ExtaddPairwiseI16x8S(): this {
    return this.simd(0x7e);
  }
  /** f32x4.pmin(a, b) = b < a ? b : a, lane-wise (one minps; a NaN b keeps a). */
  f32x4Pmin(): this {
    return this.simd(0xea);
  }
  /** f32x4.pmax(a, b) = a < b ? b : a, lane-wise (one maxps; a NaN b keeps a). */
  f32x4Pmax(): this {
    return this.simd(0xeb);
  }
  /** i16x8.add: wrapping (callers prove their sums fit). */
  i16x8Add(): this {
    return this.simd(0x8e);
  }
}

function section(id: number, payload: number[]): number[] {
  return [id, ...uleb(payload.length), ...payload];
}

function vec(items: number[][]): number[] {
  return [...uleb(items.length), ...items.flat()];
}

function name(text: string): number[] {
  const b = [...Buffer.from(text, 'utf8')];
  return [...uleb(b.length), ...b];
}

export interface FunctionDef {
  readonly name: string;
  readonly params: readonly number[];
  /** Extra locals, by type, after the parameters. */
  readonly locals: readonly number[];
  /** Result types; none when omitted. */
  readonly results?: readonly number[];
  readonly code: Code;
}

export interface ModuleOptions {
  /**
   * Import the memory as `env.memory`, shared, exactly `pages` long (initial = maximum), instead
   * of defining and exporting one: threads instantiate the same module over one SharedArrayBuffer.
   */
  readonly sharedMemory?: boolean;
}

/**
 * A module with one memory (`pages` x 64 KiB; exported as "memory", or imported shared) and the
 * given exported functions (no results unless a function says so).
 */
export function moduleBytes(pages: number, functions: readonly FunctionDef[], options: ModuleOptions = {}): Uint8Array {
  const types = section(1, vec(functions.map((f) => [0x60, ...vec(f.params.map((p) => [p])), ...vec((f.results ?? []).map((r) => [r]))])));
  const imports = options.sharedMemory ? section(2, vec([[...name('env'), ...name('memory'), 0x02, 0x03, ...uleb(pages), ...uleb(pages)]])) : [];
  const funcs = section(3, vec(functions.map((_, i) => uleb(i))));
  const memory = options.sharedMemory ? [] : section(5, vec([[0x00, ...uleb(pages)]]));
  const exported = functions.map((f, i) => [...name(f.name), 0x00, ...uleb(i)]);
  const exports = section(7, vec(options.sharedMemory ? exported : [[...name('memory'), 0x02, 0], ...exported]));
  const bodies = functions.map((f) => {
    // Locals as runs of one type each.
    const runs: number[][] = [];
    for (const t of f.locals) {
      const last = runs[runs.length - 1];
      if (last && last[1] === t) last[0]++;
      else runs.push([1, t]);
    }
    const body = [...vec(runs.map(([n, t]) => [...uleb(n), t])), ...f.code.bytes, 0x0b];
    return [...uleb(body.length), ...body];
  });
  const code = section(10, vec(bodies));
  return Uint8Array.from([0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00, ...types, ...imports, ...funcs, ...memory, ...exports, ...code]);
}
