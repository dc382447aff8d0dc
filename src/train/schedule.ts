/**
 * Learning-rate schedules, evaluated per update step. A shape (constant, step, cosine) gives
 * the rate for a position in the run; an optional linear warm-up over the first W updates
 * scales any shape from lr/W up to the full rate.
 */

export type ScheduleShape =
  | { readonly kind: 'constant' }
  /** Multiply by `factor` every `everyEpochs` epochs. */
  | { readonly kind: 'step'; readonly everyEpochs: number; readonly factor: number }
  /** Half a cosine from the base rate down to `floor` over the whole run. */
  | { readonly kind: 'cosine'; readonly floor: number };

export interface Schedule {
  readonly shape: ScheduleShape;
  /** Updates of linear warm-up; 0 for none. */
  readonly warmupSteps: number;
}

export interface SchedulePosition {
  /** 0-based epoch. */
  readonly epoch: number;
  /** 0-based update index counted over the whole run. */
  readonly step: number;
  /** Updates in the whole run. */
  readonly totalSteps: number;
}

/**
 * Learning rate at `at` for a base rate `base`.
 *
 * @example rateAt({ shape: { kind: 'step', everyEpochs: 10, factor: 0.5 }, warmupSteps: 0 }, 0.1, { epoch: 25, step: 0, totalSteps: 1 }) // 0.025
 */
export function rateAt(schedule: Schedule, base: number, at: SchedulePosition): number {
  let rate: number;
  const shape = schedule.shape;
  switch (shape.kind) {
    case 'constant':
      rate = base;
      break;
    case 'step':
      rate = base * Math.pow(shape.factor, Math.floor(at.epoch / shape.everyEpochs));
      break;
    case 'cosine': {
      const span = Math.max(1, at.totalSteps - 1);
      const progress = Math.min(1, at.step / span);
      rate = shape.floor + (base - shape.floor) * 0.5 * (1 + Math.cos(Math.PI * progress));
      break;
    }
  }
  if (schedule.warmupSteps > 0 && at.step < schedule.warmupSteps) {
    rate *= (at.step + 1) / schedule.warmupSteps;
  }
  return rate;
}
