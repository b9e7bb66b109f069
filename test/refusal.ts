import { InputError } from '../src/errors.js';

/**
 * The error of class `kind` (default InputError) that `f` throws; any other
 * error is rethrown, and no error at all fails the test.
 */
export function refusal<E extends Error = InputError>(f: () => unknown, kind: new (...args: never[]) => E = InputError as unknown as new (...args: never[]) => E): E {
  try {
    f();
  } catch (e) {
    if (e instanceof kind) return e;
    throw e;
  }
  throw new Error(`expected an ${kind.name}, nothing was thrown`);
}
