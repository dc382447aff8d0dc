/**
 * Diagnostics for the usual reasons a network fails to train. Each is a plain object the CLI
 * prints and tests read; `code` is stable, `message` says what was seen, `hint` what to try.
 */
import type { Layer, Normalisation } from '../model/types.js';

export type DiagnosticCode = 'vanishing_gradient' | 'dead_relu' | 'linear_stack' | 'raw_inputs' | 'engine_fallback' | 'constant_features';

export interface Diagnostic {
  readonly code: DiagnosticCode;
  readonly message: string;
  readonly hint: string;
  /** Layer index the diagnostic is about, when there is one. */
  readonly layer?: number;
  /** 0-based epoch it was seen in, for per-epoch diagnostics. */
  readonly epoch?: number;
}

/** The lowest dense layer's gradient norm this many times below the top one's counts as vanishing. */
export const VANISHING_RATIO = 1000;
/** Past this share of never-firing ReLU units a layer is reported as dying. */
export const DEAD_RELU_SHARE = 0.5;
/** Raw features count as far from standardised past these bounds. */
export const RAW_MEAN_LIMIT = 3;
export const RAW_STD_RANGE = [0.2, 5] as const;

export interface LayerNorm {
  readonly layer: number;
  readonly kind: Layer['kind'];
  /** L2 norm of all the layer's parameter gradients together. */
  readonly norm: number;
}

/**
 * Vanishing-gradient warning: the lowest dense layer's gradient norm is more than
 * VANISHING_RATIO times smaller than the top dense layer's. Needs two dense layers.
 *
 * @example vanishingGradient([{ layer: 0, kind: 'dense', norm: 1e-6 }, { layer: 1, kind: 'dense', norm: 1 }], 3) // a diagnostic
 */
export function vanishingGradient(norms: readonly LayerNorm[], epoch?: number): Diagnostic | null {
  const dense = norms.filter((n) => n.kind === 'dense').sort((a, b) => a.layer - b.layer);
  if (dense.length < 2) return null;
  const low = dense[0];
  const top = dense[dense.length - 1];
  if (!(low.norm * VANISHING_RATIO < top.norm)) return null;
  const ratio = low.norm > 0 ? top.norm / low.norm : Infinity;
  return {
    code: 'vanishing_gradient',
    message: `gradient norm of layer ${low.layer} (${low.norm.toExponential(2)}) is ${ratio === Infinity ? 'infinitely' : ratio.toExponential(1) + 'x'} below layer ${top.layer} (${top.norm.toExponential(2)})`,
    hint: 'use a ReLU-family activation in hidden layers, add batch normalisation, or use fewer layers',
    layer: low.layer,
    epoch,
  };
}

/**
 * Counts, per ReLU layer, which units produced a positive output at least once over an epoch.
 */
export class ReluActivity {
  private readonly fired = new Map<number, Uint8Array>();

  /** Record one batch's outputs `y` (rows x units) of ReLU layer `layer`. */
  observe(layer: number, y: ArrayLike<number>, rows: number, units: number): void {
    let seen = this.fired.get(layer);
    if (!seen) this.fired.set(layer, (seen = new Uint8Array(units)));
    for (let r = 0; r < rows; r++) {
      const o = r * units;
      for (let u = 0; u < units; u++) if (y[o + u] > 0) seen[u] = 1;
    }
  }

  /** Share of units that never fired, per observed layer. */
  deadShares(): { layer: number; dead: number; units: number }[] {
    const out: { layer: number; dead: number; units: number }[] = [];
    for (const [layer, seen] of [...this.fired].sort((a, b) => a[0] - b[0])) {
      let dead = 0;
      for (const s of seen) if (!s) dead++;
      out.push({ layer, dead, units: seen.length });
    }
    return out;
  }

  /**
   * One diagnostic per ReLU layer where more than half the units never fired.
   *
   * @example activity.warnings(4) // [{ code: 'dead_relu', layer: 0, ... }]
   */
  warnings(epoch?: number): Diagnostic[] {
    return this.deadShares()
      .filter((s) => s.units > 0 && s.dead / s.units > DEAD_RELU_SHARE)
      .map((s) => ({
        code: 'dead_relu' as const,
        message: `${s.dead} of ${s.units} ReLU units in layer ${s.layer} never fired on this epoch's rows`,
        hint: 'lower the learning rate, use leaky_relu or softplus, or check the biases',
        layer: s.layer,
        epoch,
      }));
  }
}

/**
 * Warnings for a dense layer with linear activation feeding another dense layer (dropout in
 * between changes nothing at inference): x·W1·W2 is one dense layer with W = W1·W2.
 *
 * @example linearStacks(doc.layers) // [{ code: 'linear_stack', layer: 0, ... }]
 */
export function linearStacks(layers: readonly Layer[]): Diagnostic[] {
  const out: Diagnostic[] = [];
  for (let i = 0; i < layers.length; i++) {
    const a = layers[i];
    if (a.kind !== 'dense' || a.activation !== 'linear') continue;
    let j = i + 1;
    while (j < layers.length && layers[j].kind === 'dropout') j++;
    if (j < layers.length && layers[j].kind === 'dense') {
      out.push({
        code: 'linear_stack',
        message: `dense layer ${i} has a linear activation and feeds dense layer ${j}: the two collapse into one dense layer`,
        hint: 'give layer ' + i + ' a non-linear activation (relu, tanh, ...) or remove it',
        layer: i,
      });
    }
  }
  return out;
}

/**
 * A warning when the model has no normalisation and some raw feature has |mean| > RAW_MEAN_LIMIT
 * or a standard deviation outside RAW_STD_RANGE. Constant features are ignored (nothing to scale).
 *
 * @example rawInputs(x, rows, 4, false) // null or { code: 'raw_inputs', ... }
 */
export function rawInputs(x: ArrayLike<number>, rows: number, features: number, hasNormalisation: boolean): Diagnostic | null {
  if (hasNormalisation || rows === 0) return null;
  const far: string[] = [];
  for (let c = 0; c < features; c++) {
    let mean = 0;
    for (let r = 0; r < rows; r++) mean += x[r * features + c];
    mean /= rows;
    let ss = 0;
    for (let r = 0; r < rows; r++) ss += (x[r * features + c] - mean) ** 2;
    const std = Math.sqrt(ss / rows);
    if (std === 0) continue;
    if (Math.abs(mean) > RAW_MEAN_LIMIT || std < RAW_STD_RANGE[0] || std > RAW_STD_RANGE[1]) {
      far.push(`feature ${c} (mean ${mean.toPrecision(3)}, std ${std.toPrecision(3)})`);
    }
  }
  if (far.length === 0) return null;
  const shown = far.slice(0, 3).join(', ') + (far.length > 3 ? ` and ${far.length - 3} more` : '');
  return {
    code: 'raw_inputs',
    message: `inputs are far from standardised and the model has no normalisation: ${shown}`,
    hint: 'add a zscore normalise block to the model; it is fitted from the training rows',
  };
}

/** Names shown in one warning line before "and N more". */
const SHOWN_NAMES = 12;

/**
 * A warning naming the features whose fitted spread is zero (z-score std 0, or min-max
 * max = min): they were constant in the rows the statistics came from, so normalisation maps
 * them to 0 and they contribute nothing to the answers. Kept rather than refused: real files
 * hold such columns (border pixels, a hold-out split that leaves one value), and a later tune
 * that continues the statistics can give them a spread again.
 *
 * @example constantFeatures(doc.normalise, ['a', 'b']) // null or { code: 'constant_features', ... }
 */
export function constantFeatures(norm: Normalisation | null, names: readonly string[] | null): Diagnostic | null {
  if (!norm) return null;
  const centre = norm.method === 'zscore' ? norm.mean : norm.min;
  const spread = norm.method === 'zscore' ? norm.std : norm.max && norm.min ? norm.max.map((hi, c) => hi - norm.min![c]) : null;
  if (!centre || !spread) return null;
  const flat: string[] = [];
  spread.forEach((s, c) => {
    if (s === 0) flat.push(names?.[c] ?? `input ${c}`);
  });
  if (flat.length === 0) return null;
  const shown = flat.slice(0, SHOWN_NAMES).join(', ') + (flat.length > SHOWN_NAMES ? ` and ${flat.length - SHOWN_NAMES} more` : '');
  const what = norm.method === 'zscore' ? 'standard deviation' : 'range';
  return {
    code: 'constant_features',
    message: `${flat.length} feature${flat.length > 1 ? 's were' : ' was'} constant in the training rows (${what} 0) and contribute${flat.length > 1 ? '' : 's'} nothing: ${shown}`,
    hint: 'the model keeps them with scale 0; drop the columns from the model, or fine-tune later with --normalisation continue on rows where they vary',
  };
}
