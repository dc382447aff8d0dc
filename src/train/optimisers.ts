/**
 * Parameter updates. Each optimiser updates float32 parameter tensors in place from gradients
 * of the same length; its state (velocities, moments) is kept in float64 so that small
 * updates accumulate without float32 rounding.
 *
 * Weight decay has two forms, chosen by `decay.mode`:
 * - 'decoupled': after the optimiser step, p -= lr * rate * p (decay independent of the
 *   gradient's scaling; for Adam this is the decoupled form).
 * - 'l2': rate * p is added to the gradient before the step (the gradient of rate/2 * ||p||^2).
 * Decay applies only to tensors marked `decays` (by the tune loop: weights, not biases or
 * batch-norm shifts).
 */

export const OPTIMISER_NAMES = ['sgd', 'momentum', 'adam'] as const;
export type OptimiserName = (typeof OPTIMISER_NAMES)[number];

export type OptimiserSpec =
  | { readonly name: 'sgd' }
  | { readonly name: 'momentum'; readonly momentum: number; readonly nesterov: boolean }
  | { readonly name: 'adam'; readonly beta1: number; readonly beta2: number; readonly epsilon: number };

export interface WeightDecay {
  readonly mode: 'decoupled' | 'l2';
  readonly rate: number;
}

export interface ParamSlot {
  /** The float32 tensor updated in place. */
  readonly data: Float32Array;
  /** Whether weight decay applies to it. */
  readonly decays: boolean;
}

export interface Optimiser {
  readonly spec: OptimiserSpec;
  /** One update of every slot; `grads[i]` belongs to `slots[i]`. A null gradient means "frozen, skip". */
  step(slots: readonly ParamSlot[], grads: readonly (Float32Array | Float64Array | null)[], lr: number): void;
  /** Number of steps taken. */
  readonly steps: number;
}

/** Adam's defaults, Kingma & Ba 2015, Algorithm 1. */
export const ADAM_DEFAULTS = { beta1: 0.9, beta2: 0.999, epsilon: 1e-8 } as const;

/**
 * A fresh optimiser with empty state.
 *
 * @example
 * const opt = makeOptimiser({ name: 'adam', ...ADAM_DEFAULTS });
 * opt.step([{ data: w, decays: true }], [dw], 0.001);
 */
export function makeOptimiser(spec: OptimiserSpec, decay: WeightDecay | null = null): Optimiser {
  const first: Float64Array[] = [];
  const second: Float64Array[] = [];
  let steps = 0;

  const stateFor = (store: Float64Array[], i: number, n: number): Float64Array => {
    let s = store[i];
    if (!s || s.length !== n) store[i] = s = new Float64Array(n);
    return s;
  };

  return {
    spec,
    get steps() {
      return steps;
    },
    step(slots, grads, lr) {
      steps++;
      // Bias corrections of Adam's moment estimates (Algorithm 1): 1 - beta^t.
      const c1 = spec.name === 'adam' ? 1 - Math.pow(spec.beta1, steps) : 1;
      const c2 = spec.name === 'adam' ? 1 - Math.pow(spec.beta2, steps) : 1;
      for (let i = 0; i < slots.length; i++) {
        const g = grads[i];
        if (!g) continue;
        const p = slots[i].data;
        const l2 = decay && decay.mode === 'l2' && slots[i].decays ? decay.rate : 0;
        const n = p.length;
        switch (spec.name) {
          case 'sgd':
            for (let j = 0; j < n; j++) p[j] = p[j] - lr * (g[j] + l2 * p[j]);
            break;
          case 'momentum': {
            const v = stateFor(first, i, n);
            const mu = spec.momentum;
            for (let j = 0; j < n; j++) {
              const gj = g[j] + l2 * p[j];
              v[j] = mu * v[j] - lr * gj;
              // Nesterov in its rewritten form: step along the look-ahead velocity.
              p[j] = spec.nesterov ? p[j] + mu * v[j] - lr * gj : p[j] + v[j];
            }
            break;
          }
          case 'adam': {
            const m = stateFor(first, i, n);
            const v = stateFor(second, i, n);
            const { beta1, beta2, epsilon } = spec;
            for (let j = 0; j < n; j++) {
              const gj = g[j] + l2 * p[j];
              m[j] = beta1 * m[j] + (1 - beta1) * gj;
              v[j] = beta2 * v[j] + (1 - beta2) * gj * gj;
              const mHat = m[j] / c1;
              const vHat = v[j] / c2;
              p[j] = p[j] - (lr * mHat) / (Math.sqrt(vHat) + epsilon);
            }
            break;
          }
        }
        if (decay && decay.mode === 'decoupled' && slots[i].decays && decay.rate > 0) {
          const f = 1 - lr * decay.rate;
          for (let j = 0; j < n; j++) p[j] = p[j] * f;
        }
      }
    },
  };
}
