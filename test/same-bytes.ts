/** A fast exact comparison of typed arrays, shared by the tests. */
import { expect } from 'vitest';

const view = (a: ArrayBufferView) => Buffer.from(a.buffer, a.byteOffset, a.byteLength);

/**
 * Assert that two typed arrays are of one type and hold the same bytes (so
 * NaN payloads and -0 compare exactly). Buffer.equals decides, since toEqual
 * over 10^5 elements takes a good part of a second each time; toEqual runs
 * only to describe a mismatch.
 */
export function expectSameBytes(got: ArrayBufferView, want: ArrayBufferView, label?: string): void {
  if (got.constructor === want.constructor && view(got).equals(view(want))) return;
  expect(got, label).toEqual(want);
  // Reached when toEqual sees equal values in different bits (NaN payloads, -0).
  expect(Array.from(view(got)), label).toEqual(Array.from(view(want)));
}
