import { describe, it, expect } from 'vitest';
import { ADAM_DEFAULTS, makeOptimiser } from '../../src/train/optimisers.js';
import { rateAt } from '../../src/train/schedule.js';
import { clipGlobalNorm, globalNorm } from '../../src/train/clip.js';

describe('optimisers (src/train/optimisers.ts)', () => {
  it('Adam first step moves each parameter with a non-zero gradient by about lr, against its sign (Kingma & Ba 2015, Algorithm 1)', () => {
    const p = Float32Array.of(1, -2, 0.5, 3, 0);
    const start = p.slice();
    const g = Float64Array.of(1e-3, -50, 7, 0, -1e-4);
    const opt = makeOptimiser({ name: 'adam', ...ADAM_DEFAULTS });
    const lr = 0.01;
    opt.step([{ data: p, decays: false }], [g], lr);
    for (let i = 0; i < p.length; i++) {
      const moved = p[i] - start[i];
      if (g[i] === 0) expect(moved).toBe(0);
      else {
        expect(Math.sign(moved)).toBe(-Math.sign(g[i]));
        // |step| = lr |g| / (|g| + eps): within 1e-4 relative of lr for these gradients; float32 storage adds ~1e-7 absolute.
        expect(Math.abs(moved)).toBeCloseTo(lr, 4);
      }
    }
  });

  it('plain SGD is p - lr g (common practice: the textbook update rule)', () => {
    const p = Float32Array.of(0.5, -0.25);
    makeOptimiser({ name: 'sgd' }).step([{ data: p, decays: false }], [Float64Array.of(2, -4)], 0.125);
    expect([...p]).toEqual([0.25, 0.25]);
  });

  it('Nesterov in velocity-rewritten form tracks the look-ahead form p + mu v (Sutskever et al. 2013; Bengio et al. 2012)', () => {
    // f(x) = 1/2 a x^2 on a single coordinate, gradient a x.
    const a = 3;
    const lr = 0.05;
    const mu = 0.9;
    let theta = 2; // look-ahead form: v = mu v - lr f'(theta + mu v); theta += v
    let v = 0;
    const p = Float32Array.of(2); // ours: gradient at the stored parameter
    const opt = makeOptimiser({ name: 'momentum', momentum: mu, nesterov: true });
    for (let t = 0; t < 20; t++) {
      opt.step([{ data: p, decays: false }], [Float64Array.of(a * p[0])], lr);
      v = mu * v - lr * a * (theta + mu * v);
      theta += v;
      // The rewritten parameter equals theta + mu v of the original form.
      expect(p[0]).toBeCloseTo(theta + mu * v, 5);
    }
  });

  it('classical momentum is the heavy-ball recursion v = mu v - lr g, p += v (Polyak 1964)', () => {
    const p = Float32Array.of(1);
    const opt = makeOptimiser({ name: 'momentum', momentum: 0.5, nesterov: false });
    opt.step([{ data: p, decays: false }], [Float64Array.of(1)], 0.25); // v = -0.25, p = 0.75
    opt.step([{ data: p, decays: false }], [Float64Array.of(1)], 0.25); // v = -0.375, p = 0.375
    expect(p[0]).toBe(0.375);
  });

  it('weight decay: decoupled shrinks by (1 - lr rate) per step; for SGD it equals L2 (Loshchilov & Hutter 2019), for Adam it does not', () => {
    const zero = Float64Array.of(0, 0);
    const p = Float32Array.of(1, -2);
    makeOptimiser({ name: 'sgd' }, { mode: 'decoupled', rate: 0.5 }).step([{ data: p, decays: true }], [zero], 0.1);
    expect(p[0]).toBeCloseTo(0.95, 7);
    expect(p[1]).toBeCloseTo(-1.9, 6);
    const q = Float32Array.of(1, -2);
    makeOptimiser({ name: 'sgd' }, { mode: 'l2', rate: 0.5 }).step([{ data: q, decays: true }], [zero], 0.1);
    expect([...q]).toEqual([...p]);
    const r1 = Float32Array.of(1);
    const r2 = Float32Array.of(1);
    makeOptimiser({ name: 'adam', ...ADAM_DEFAULTS }, { mode: 'l2', rate: 0.5 }).step([{ data: r1, decays: true }], [Float64Array.of(0)], 0.1);
    makeOptimiser({ name: 'adam', ...ADAM_DEFAULTS }, { mode: 'decoupled', rate: 0.5 }).step([{ data: r2, decays: true }], [Float64Array.of(0)], 0.1);
    expect(r1[0]).toBeCloseTo(0.9, 5); // L2 through Adam: a unit-size step of lr
    expect(r2[0]).toBeCloseTo(0.95, 6); // decoupled: lr * rate * p
    const untouched = Float32Array.of(1);
    makeOptimiser({ name: 'sgd' }, { mode: 'decoupled', rate: 0.5 }).step([{ data: untouched, decays: false }], [Float64Array.of(0)], 0.1);
    expect(untouched[0]).toBe(1);
  });

  it('skips frozen tensors (null gradient)', () => {
    const p = Float32Array.of(1);
    makeOptimiser({ name: 'adam', ...ADAM_DEFAULTS }).step([{ data: p, decays: true }], [null], 0.1);
    expect(p[0]).toBe(1);
  });
});

describe('learning-rate schedules (src/train/schedule.ts)', () => {
  const at = (epoch: number, step: number, totalSteps = 101) => ({ epoch, step, totalSteps });
  it('step drops by the factor every N epochs', () => {
    const s = { shape: { kind: 'step' as const, everyEpochs: 10, factor: 0.5 }, warmupSteps: 0 };
    expect(rateAt(s, 0.1, at(9, 0))).toBe(0.1);
    expect(rateAt(s, 0.1, at(10, 0))).toBe(0.05);
    expect(rateAt(s, 0.1, at(25, 0))).toBe(0.025);
  });
  it('cosine runs from the base rate to the floor, through their mean halfway (half-cosine; Loshchilov & Hutter 2017)', () => {
    const s = { shape: { kind: 'cosine' as const, floor: 0.01 }, warmupSteps: 0 };
    expect(rateAt(s, 0.1, at(0, 0))).toBeCloseTo(0.1, 15);
    expect(rateAt(s, 0.1, at(0, 50))).toBeCloseTo(0.055, 15);
    expect(rateAt(s, 0.1, at(0, 100))).toBeCloseTo(0.01, 15);
  });
  it('linear warm-up scales any shape over the first W updates', () => {
    const s = { shape: { kind: 'constant' as const }, warmupSteps: 4 };
    const expected = [0.05, 0.1, 0.15, 0.2, 0.2, 0.2];
    [0, 1, 2, 3, 4, 9].forEach((k, i) => expect(rateAt(s, 0.2, at(0, k))).toBeCloseTo(expected[i], 15));
  });
});

describe('gradient clipping (src/train/clip.ts)', () => {
  it('scales to the global norm over all tensors, keeping direction (3-4-5 triangle)', () => {
    const a = Float64Array.of(3);
    const b = Float32Array.of(4);
    expect(globalNorm([a, null, b])).toBe(5);
    const r = clipGlobalNorm([a, b], 1);
    expect(r).toEqual({ norm: 5, factor: 0.2 });
    expect(a[0]).toBeCloseTo(0.6, 15);
    expect(b[0]).toBeCloseTo(0.8, 6);
    const c = Float64Array.of(0.3);
    expect(clipGlobalNorm([c], 1).factor).toBe(1);
    expect(c[0]).toBe(0.3);
  });
});
