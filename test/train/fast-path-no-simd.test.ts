import { describe, it, expect, vi } from 'vitest';
import { tune } from '../../src/train/tune.js';
import { denseSpec, docOf } from '../fixtures/models.js';

// A runtime without WebAssembly SIMD, simulated: the probe says no (the kernel is never built).
vi.mock('../../src/engine/fast/dense-kernel.js', async (importOriginal) => ({
  ...(await importOriginal<typeof import('../../src/engine/fast/dense-kernel.js')>()),
  wasmSimdAvailable: () => false,
}));

const data = { x: Float32Array.of(0, 0, 0, 1, 1, 0, 1, 1), rows: 4, y: Int32Array.of(0, 1, 1, 0) };

describe('training without WebAssembly SIMD (src/train/tune.ts)', () => {
  it('an explicit "fast" trains on the tfjs engine with an engine_fallback diagnostic naming SIMD', async () => {
    const res = await tune(docOf(2, [denseSpec(4, 'tanh'), denseSpec(2, 'softmax')]), data, { epochs: 2, path: 'fast' });
    expect(res.path).toBe('engine');
    expect(res.history).toHaveLength(2);
    const fallback = res.diagnostics.find((d) => d.code === 'engine_fallback');
    expect(fallback?.message).toMatch(/WebAssembly SIMD/);
  });

  it('the default is the tfjs engine, without a diagnostic', async () => {
    const res = await tune(docOf(2, [denseSpec(4, 'tanh'), denseSpec(2, 'softmax')]), data, { epochs: 1 });
    expect(res.path).toBe('engine');
    expect(res.diagnostics.some((d) => d.code === 'engine_fallback')).toBe(false);
  });
});
