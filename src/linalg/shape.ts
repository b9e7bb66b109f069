import { InputCode, InputError } from '../errors.js';

/**
 * Throws InputError (code `shape`) unless m and n are positive integers and
 * len === m * n. `what` names the argument in the message.
 */
export function checkShape(len: number, m: number, n: number, what: string): void {
  if (!Number.isInteger(m) || !Number.isInteger(n) || m < 1 || n < 1) {
    throw new InputError(InputCode.Shape, `${what}: shape ${m} x ${n} must be positive integers`);
  }
  if (len !== m * n) {
    throw new InputError(InputCode.Shape, `${what}: array length ${len} does not match shape ${m} x ${n}`);
  }
}
