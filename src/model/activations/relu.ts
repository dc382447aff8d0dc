import { tfjs } from '../tfjs-lazy.js';
import { pointwiseF32 } from './f32.js';
import type { ActivationKind } from './kind.js';

/** f(z) = max(z, 0). The derivative at exactly 0 is taken as 0 on both paths. */
export const relu: ActivationKind = {
  name: 'relu',
  code: 2,
  usesAlpha: false,
  init: 'he',
  fused: 'relu',
  refForward(z) {
    const y = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) y[i] = z[i] > 0 ? z[i] : 0;
    return y;
  },
  refBackward(z, _y, dy) {
    const dz = new Float64Array(z.length);
    for (let i = 0; i < z.length; i++) dz[i] = z[i] > 0 ? dy[i] : 0;
    return dz;
  },
  engineForward: (z) => tfjs().relu(z),
  engineBackward: (z, _y, dy) => tfjs().where(tfjs().greater(z, 0), dy, tfjs().zerosLike(dy)),
  // Fused into the kernel's store. Backward asks only whether z > 0, which is whether y > 0,
  // so a caller may hand y in z's place.
  f32: pointwiseF32(
    (z) => (z > 0 ? z : 0),
    (z) => (z > 0 ? 1 : 0),
    'relu',
  ),
};
