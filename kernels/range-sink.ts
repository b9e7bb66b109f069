/**
 * The output side of the range encoder of kernels/symbols-encode.ts
 * (ByteSink in src/codec/code-encode.ts): the
 * bytes written so far, the last byte held back (it may still take a
 * carry) and how many 0xff bytes follow it. The coder's low end (below
 * 2^32 plus a carry) is passed in and out, so a hot loop keeps it in a
 * local; this state, touched once per byte written, is in module globals.
 * Writing stops, and `overflow` is set, at `cap` bytes: the caller then
 * leaves the stream to the JavaScript.
 */

/** Bytes written at the output. */
export let written: i32 = 0;
/** Whether a byte did not fit. */
export let overflow = false;
let outAt: usize = 0;
let cap: i32 = 0;
let cache: u32 = 0;
let pending: i32 = 0;
let started = false;

/** Start an empty output of `size` bytes at `at`. */
export function startSink(at: usize, size: i32): void {
  written = 0;
  outAt = at;
  cap = size;
  cache = 0;
  pending = 0;
  started = false;
  overflow = false;
}

function put(byte: u32): void {
  if (written >= cap) {
    overflow = true;
    return;
  }
  store<u8>(outAt + <usize>written, <u8>byte);
  written++;
}

/** Move the top byte of low out, a carry going into the bytes held back (ByteSink.shiftLow); the new low. */
export function shiftLow(low: u64): u64 {
  if (low < 0xff000000 || low >= 0x100000000) {
    const carry = <u32>(low >> 32);
    // The very first byte is always 0 (the interval starts inside [0, 1)): it is not written.
    if (started) put((cache + carry) & 0xff);
    started = true;
    for (; pending > 0; pending--) put((0xff + carry) & 0xff);
    cache = <u32>(low >> 24) & 0xff;
  } else pending++;
  return (low & 0xffffff) << 8;
}

/** Flush: enough bytes to pin down a value in the final interval (ByteSink.finish). */
export function finishSink(low: u64): void {
  let l = low;
  for (let x = 0; x < 5; x++) l = shiftLow(l);
}
