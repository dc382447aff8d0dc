/** Shared validation helpers for the layer kinds. */
import type { Problem } from '../../errors.js';

export function isPositiveInt(n: number): boolean {
  return Number.isInteger(n) && n > 0;
}

/** One problem naming the first non-finite value of a tensor, or none. */
export function finiteProblems(data: ArrayLike<number>, tensor: string, where: string): Problem[] {
  for (let i = 0; i < data.length; i++) {
    if (!Number.isFinite(data[i])) {
      return [{ where, message: `${tensor}[${i}] is ${data[i]}; every value must be finite` }];
    }
  }
  return [];
}
