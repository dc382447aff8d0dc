/** Helpers for the format tests (the model builders are in test/fixtures/models.ts). */

/** Run `fn` and return what it threw (fails the test if it did not throw). */
export function thrown(fn: () => unknown): unknown {
  try {
    fn();
  } catch (error) {
    return error;
  }
  throw new Error('expected a throw, got a return');
}
