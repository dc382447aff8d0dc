/**
 * Measuring what a call allocates and how long it takes, for the hostile-input properties.
 *
 * Memory: `process.memoryUsage()` is read before and right after the call. ArrayBuffer backing
 * stores count in `arrayBuffers` until collected, JS objects in `heapUsed`, so the delta is what
 * the call allocated minus whatever a collection that happened to run midway freed. V8's
 * collector is forced now and then (the `gc` function is exposed through
 * v8.setFlagsFromString, a documented V8 flag) so the baseline does not drift.
 */
import { setFlagsFromString } from 'node:v8';
import { runInNewContext } from 'node:vm';

setFlagsFromString('--expose-gc');
const collect = runInNewContext('gc') as () => void;

export interface Measured<T> {
  /** What the call returned, or what it threw. */
  readonly outcome: { ok: true; value: T } | { ok: false; error: unknown };
  /** Growth of ArrayBuffer memory plus JS heap across the call, in bytes (never negative). */
  readonly allocated: number;
  readonly milliseconds: number;
}

/** A full collection costs several milliseconds in a test worker; one in COLLECT_EVERY calls keeps the baseline honest. */
const COLLECT_EVERY = 20;
let calls = 0;

/**
 * Run `fn` and report what it did, how long it took and how much memory grew. Without a forced
 * collection right before, the delta can only be smaller than what the call allocated if the
 * collector ran during the call; it is never larger.
 */
export function measure<T>(fn: () => T, options: { collectFirst?: boolean } = {}): Measured<T> {
  if (options.collectFirst || calls++ % COLLECT_EVERY === 0) collect();
  const before = process.memoryUsage();
  const started = performance.now();
  let outcome: Measured<T>['outcome'];
  try {
    outcome = { ok: true, value: fn() };
  } catch (error) {
    outcome = { ok: false, error };
  }
  const milliseconds = performance.now() - started;
  const after = process.memoryUsage();
  const allocated = Math.max(0, after.arrayBuffers - before.arrayBuffers) + Math.max(0, after.heapUsed - before.heapUsed);
  return { outcome, allocated, milliseconds };
}
