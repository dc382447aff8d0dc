import { tfjs } from '../tfjs-lazy.js';
import { pointwiseF32 } from './f32.js';
import type { ActivationKind } from './kind.js';

/** f(z) = z. */
export const linear: ActivationKind = {
  name: 'linear',
  code: 1,
  usesAlpha: false,
  init: 'glorot',
  fused: 'linear',
  refForward: (z) => Float64Array.from(z),
  refBackward: (_z, _y, dy) => Float64Array.from(dy),
  // A clone, not z itself: callers dispose y and z independently.
  engineForward: (z) => tfjs().clone(z),
  engineBackward: (_z, _y, dy) => tfjs().clone(dy),
  f32: {
    ...pointwiseF32(
      (z) => z,
      () => 1,
    ),
    // Nothing to do after the kernel's product.
    forward: () => undefined,
  },
};
