/**
 * The WebAssembly kernels (kernels/*.ts, compiled into ./kernels-bytes.ts):
 * the range finder's matrix product and the blend predictor's decoding walk,
 * each bit for bit the same as its JavaScript version, which stays the
 * fallback. Instantiated synchronously, lazily, once per thread (module
 * state, and every worker thread has its own): the module is under 4 KiB,
 * below the size browsers allow to compile synchronously on the main thread
 * (4 KiB in Chromium: from memory). Where WebAssembly or its 128-bit SIMD
 * is missing, or compiling or instantiating fails (a page's content
 * security policy, say), {@link kernels} gives null and callers run the
 * JavaScript. The environment variable RANKFIELD_KERNELS=js (read where a
 * `process` global exists) forces the JavaScript everywhere, and
 * {@link setKernelMode} does so for tests.
 *
 * Memory: the module's own linear memory, which starts empty and grows as
 * the largest input needs. The first {@link WEIGHTS_BYTES} bytes hold the
 * blend predictor's weight table once it is loaded; callers lay out their
 * arrays from {@link SCRATCH_AT}, under a lease ({@link Kernels.lease}):
 * one user at a time, a nested user gets none and runs the JavaScript.
 * When a lease ends with the memory above {@link KEEP_BYTES}, the instance
 * is dropped (its memory with it) and the next use makes a small one.
 */
import { KERNELS_BASE64 } from './kernels-bytes.js';

/** The kernels' exports (kernels/index.ts): addresses are byte offsets into `memory`. */
interface KernelExports {
  memory: WebAssembly.Memory;
  mulPairs(w: number, rows: number, cols: number, g: number, pairs: number, y: number): void;
  blendDecode(q: number, m: number, n: number, limit: number, weight: number, above: number, below: number): number;
}

/** Bytes kept for the blend weight table (4 x 8191 + 1 entries of 4 bytes, rounded up to 64 KiB pages). */
export const WEIGHTS_BYTES = 131072;
/** Where callers' arrays start. */
export const SCRATCH_AT = WEIGHTS_BYTES;
/** Memory above this is given back when a lease ends (common practice, no source: a few large tiles' worth). */
export const KEEP_BYTES = 16 * 1024 * 1024;
const PAGE = 65536;

/** One instance of the kernels and views of its memory (renewed when the memory grows). */
export class Kernels {
  f64: Float64Array;
  i32: Int32Array;
  /** Whether the blend weight table is in memory (at 0). */
  weightsLoaded = false;
  private leased = false;

  constructor(readonly fn: KernelExports) {
    this.f64 = new Float64Array(fn.memory.buffer);
    this.i32 = new Int32Array(fn.memory.buffer);
  }

  /**
   * Take the memory for one use of `bytes` bytes from {@link SCRATCH_AT}:
   * false (run the JavaScript) when another use holds it or it cannot grow
   * that far. Views taken before may be stale after this: use `f64`, `i32`.
   */
  lease(bytes: number): boolean {
    if (this.leased) return false;
    const need = SCRATCH_AT + bytes;
    const have = this.fn.memory.buffer.byteLength;
    if (need > have) {
      try {
        this.fn.memory.grow(Math.ceil((need - have) / PAGE));
      } catch {
        return false;
      }
      this.f64 = new Float64Array(this.fn.memory.buffer);
      this.i32 = new Int32Array(this.fn.memory.buffer);
    }
    this.leased = true;
    return true;
  }

  /** End a use; a memory grown past {@link KEEP_BYTES} goes with this instance. */
  release(): void {
    this.leased = false;
    if (this.fn.memory.buffer.byteLength > KEEP_BYTES && current === this) current = undefined;
  }
}

/** The compiled module (kept: a new instance of it is cheap), null when it cannot be had; undefined before the first try. */
let compiled: WebAssembly.Module | null | undefined;
/** This thread's instance; undefined when none is made yet. */
let current: Kernels | null | undefined;
/** 'js' forces the JavaScript; 'auto' uses the kernels when they instantiate. */
let mode: 'auto' | 'js' | undefined;

/** The environment's choice: RANKFIELD_KERNELS=js forces the JavaScript (any other value, or none, leaves it to the machine). */
function envMode(): 'auto' | 'js' {
  const env = (globalThis as { process?: { env?: Record<string, string | undefined> } }).process?.env;
  return env?.RANKFIELD_KERNELS === 'js' ? 'js' : 'auto';
}

function decodeBase64(s: string): Uint8Array<ArrayBuffer> {
  const text = atob(s);
  const out = new Uint8Array(text.length);
  for (let i = 0; i < text.length; i++) out[i] = text.charCodeAt(i);
  return out;
}

function instantiate(): Kernels | null {
  if (compiled === undefined) {
    try {
      compiled = typeof WebAssembly === 'object' ? new WebAssembly.Module(decodeBase64(KERNELS_BASE64)) : null;
    } catch {
      compiled = null; // no SIMD, or compilation refused
    }
  }
  if (compiled === null) return null;
  try {
    return new Kernels(new WebAssembly.Instance(compiled, {}).exports as unknown as KernelExports);
  } catch {
    return null;
  }
}

/** This thread's kernels, instantiated on first use; null when the JavaScript is to run. */
export function kernels(): Kernels | null {
  if (mode === undefined) mode = envMode();
  if (mode === 'js') return null;
  if (current === undefined) current = instantiate();
  return current;
}

/**
 * Library-internal, for tests: 'js' runs the JavaScript versions, 'auto'
 * the kernels where they instantiate, undefined goes back to the
 * environment's choice. Returns the mode that was in force.
 */
export function setKernelMode(m: 'auto' | 'js' | undefined): 'auto' | 'js' {
  const was = mode ?? envMode();
  mode = m;
  return was;
}
