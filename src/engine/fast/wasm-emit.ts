/**
 * A tiny WebAssembly binary writer: just the sections and instructions the fast dense kernel
 * needs (i32 arithmetic, loops, v128 loads/stores and f32x4 arithmetic). Opcodes follow the
 * WebAssembly core specification 2.0 (binary format) and the fixed-width SIMD proposal.
 */

export const I32 = 0x7f;
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

/**
 * A module with one exported memory ("memory", `pages` x 64 KiB) and the given exported functions
 * (no results unless a function says so).
 */
export function moduleBytes(pages: number, functions: readonly FunctionDef[]): Uint8Array {
  const types = section(1, vec(functions.map((f) => [0x60, ...vec(f.params.map((p) => [p])), ...vec((f.results ?? []).map((r) => [r]))])));
  const funcs = section(3, vec(functions.map((_, i) => uleb(i))));
  const memory = section(5, vec([[0x00, ...uleb(pages)]]));
  const exports = section(7, vec([[...name('memory'), 0x02, 0], ...functions.map((f, i) => [...name(f.name), 0x00, ...uleb(i)])]));
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
  return Uint8Array.from([0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00, ...types, ...funcs, ...memory, ...exports, ...code]);
}
