import { InputError } from '../src/errors.js';

/** The InputError that `f` throws; any other error is rethrown, and no error at all fails the test. */
export function refusal(f: () => unknown): InputError {
  try {
    f();
  } catch (e) {
    if (e instanceof InputError) return e;
    throw e;
  }
  throw new Error('expected an InputError, nothing was thrown');
}
