/**
 * The integer kernel's ceiling on this machine: its own inner loop on data that stays in L1 (one
 * 8-column panel of 2048 inputs, every row tile reading the same rows, the epilogue once per
 * 2048 inputs), so neither memory, quantisation nor the calls around it count. A model's
 * multiply-adds per second over this figure is how close the kernel runs to what its instruction
 * sequence allows here.
 */
import { wasmApi } from '../engine/fast/dense-kernel.js';
import { moduleBytes } from '../engine/fast/wasm-emit.js';
import { CODE_BYTES, COL_VECTORS, denseInt8Function, type Int8Arith } from '../engine/int8/kernels.js';

const INPUTS = 2048;
const ROWS = 400;

/**
 * Multiply-adds per second of the int8 kernel's inner loop on L1-resident data: the best of
 * short timings over about `minMs` (the best, since the figure is a ceiling and a shared machine
 * only ever slows a timing down).
 * @example int8InnerLoopRate('relaxed') // e.g. 6e10
 */
export function int8InnerLoopRate(arith: Int8Arith, minMs = 300): number {
  const def = denseInt8Function(arith);
  const instance = new (wasmApi().Instance)(new (wasmApi().Module)(moduleBytes(4, [def])), {});
  const exports = instance.exports as Record<string, unknown> & { memory: { buffer: ArrayBuffer } };
  const dense = exports[def.name] as (...args: number[]) => void;
  const cols = 4 * COL_VECTORS;
  // Layout: codes of the rows, per-row (scale, zero), packed weights, column sums, scales and bias, output.
  const x = 0;
  const params = 64 * 1024;
  const w = 2 * 64 * 1024;
  const sums = w + INPUTS * cols * CODE_BYTES[arith];
  const y = sums + 3 * cols * 4;
  new Uint8Array(exports.memory.buffer).fill(3, 0, y);
  // Ordinary scales and biases for the epilogue: bytes of 3 read as float32 are about 4e-37, and
  // their products fall into subnormals, which x64 handles slowly: the ceiling would read low.
  const f32 = new Float32Array(exports.memory.buffer);
  const i32 = new Int32Array(exports.memory.buffer);
  for (let r = 0; r < ROWS; r++) {
    f32[params / 4 + 2 * r] = 0.01;
    i32[params / 4 + 2 * r + 1] = 3;
  }
  f32.fill(0.02, (sums + cols * 4) / 4, (sums + 2 * cols * 4) / 4);
  f32.fill(0.1, (sums + 2 * cols * 4) / 4, (sums + 3 * cols * 4) / 4);
  const call = () => dense(x, 0, params, w, sums, sums + cols * 4, sums + 2 * cols * 4, y, 0, ROWS, INPUTS / 4, cols, 1);
  const perCall = ROWS * INPUTS * cols;
  call();
  let best = 0;
  const started = performance.now();
  while (performance.now() - started < minMs) {
    const t0 = performance.now();
    for (let i = 0; i < 4; i++) call();
    const seconds = (performance.now() - t0) / 1000;
    if (seconds > 0) best = Math.max(best, (4 * perCall) / seconds);
  }
  return best;
}
