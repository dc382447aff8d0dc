/**
 * Inverted dropout: identity at inference; in training y = x ⊙ mask, where the context's mask
 * holds 0 or 1/(1-rate), so the expected output equals the input and inference needs no rescale.
 * Backward multiplies by the same mask. No trainable parameters.
 * Reference saved: the mask as float64, or null at inference. Engine saved: [mask] or [].
 */
import { tfjs } from '../tfjs-lazy.js';
import type { DropoutLayer } from '../types.js';
import { as2D } from './engine-util.js';
import { storedFieldProblems, type StoredForm } from './fields.js';
import type { LayerKind, Mat64 } from './kind.js';
import { mat64 } from './mat64.js';

/**
 * What a dropout layer stores (formats/tendon.proto, DropoutParams), with the one home of the
 * rate rule: rate 1 would zero everything and make the 1/(1-rate) scale infinite.
 */
const STORED = {
  output: 'in',
  fields: [{ type: 'number', key: 'rate', proto: 'rate', spec: 'rate', rule: { ok: (v) => v >= 0 && v < 1, rule: 'in [0, 1)' }, default: 0.5 }],
} as const satisfies StoredForm<DropoutLayer>;

function refBackward(saved: unknown, dy: Mat64) {
  if (saved === null) return { dx: mat64(dy.rows, dy.cols, Float64Array.from(dy.data)), grads: [] };
  if (!(saved instanceof Float64Array)) throw new Error('dropout backward: saved is not from a dropout reference forward');
  const dx = new Float64Array(dy.data.length);
  for (let i = 0; i < dx.length; i++) dx[i] = dy.data[i] * saved[i];
  return { dx: mat64(dy.rows, dy.cols, dx), grads: [] };
}

/** The dropout layer kind. */
export const dropout: LayerKind<DropoutLayer, typeof STORED> = {
  kind: 'dropout',
  stored: STORED,
  tensors: () => [],
  trainable: () => [],
  clone: (layer) => ({ ...layer }),
  fillEmpty: () => null,
  describe: (layer) => `rate ${layer.rate}`,
  validate: (layer, inputWidth, where) => storedFieldProblems(STORED, layer, inputWidth, where),
  reference: {
    forward(layer, x, ctx, index) {
      if (!ctx.training) return { y: mat64(x.rows, x.cols, Float64Array.from(x.data)), saved: null };
      const mask = Float64Array.from(ctx.dropoutMask(index, x.rows, x.cols, layer.rate));
      const y = new Float64Array(x.data.length);
      for (let i = 0; i < y.length; i++) y[i] = x.data[i] * mask[i];
      return { y: mat64(x.rows, x.cols, y), saved: mask };
    },
    backward: (_layer, saved, dy) => refBackward(saved, dy),
  },
  engine: {
    upload: () => [],
    forward(layer, _weights, x, ctx, index) {
      if (!ctx.training) return { y: tfjs().clone(x), saved: [] };
      const [rows, cols] = x.shape;
      const mask = tfjs().tensor2d(ctx.dropoutMask(index, rows, cols, layer.rate), [rows, cols]);
      return { y: as2D(tfjs().mul(x, mask), 'dropout output'), saved: [mask] };
    },
    backward(_layer, _weights, saved, dy) {
      const mask = saved[0];
      return { dx: mask ? as2D(tfjs().mul(dy, mask), 'dropout dx') : tfjs().clone(dy), grads: [] };
    },
  },
  simd: {
    inference: () => ({ op: 'identity' }),
    training: (layer) => ({ op: 'mask', rate: layer.rate }),
  },
};
