/**
 * The WebAssembly kernels (kernels/*.ts, compiled into ./kernels-bytes.ts):
 * the range finder's matrix product (with the copies that lay out its
 * operands) and the blend predictor's decoding walk, each bit for bit the
 * same as its JavaScript version, which stays the fallback. Instantiated synchronously, lazily, once per thread (module
 * state, and every worker thread has its own): the module is under 4 KiB,
 * below the size browsers allow to compile synchronously on the main thread
 * (4 KiB in Chromium: from memory). Where WebAssembly or its 128-bit SIMD
 * is missing, or compiling or instantiating fails (a page's content
 * security policy, say), {@link kernels} gives null and callers run the
 * JavaScript. The environment variable RANKFIELD_KERNELS=js (read where a
 * `process` global exists) forces the JavaScript everywhere, and
 * {@link setKernelMode} does so for tests.
 *
 * Memory: each instance imports a memory the loader made for it, sized
 * for the largest use so far. When a use needs more, the loader makes a new,
 * larger memory (at least twice the size) and a new instance over it, and
 * never grows a memory in place: growing detaches the memory's old
 * ArrayBuffer, and once any ArrayBuffer has been detached V8 checks every
 * typed-array access of optimized code for detachment (its "array buffer
 * detaching protector", from memory): measured here, truncatedSvd of a
 * 64 x 64 matrix in JavaScript went from 1326 to 1860 us a call after one
 * 8-byte buffer was detached (scratch measurement, Node 20). The first
 * {@link WEIGHTS_BYTES} bytes hold the blend predictor's weight table once
 * it is loaded; callers lay out their arrays from {@link SCRATCH_AT}, under
 * a lease ({@link Kernels.lease}): one user at a time, a nested user gets
 * none and runs the JavaScript. When a lease ends with the memory above
 * {@link KEEP_BYTES}, the memory is dropped and the next use makes a small
 * one.
 */
import { KERNELS_BASE64 } from './kernels-bytes.js';

/** The kernels' exports (kernels/index.ts): addresses are byte offsets into the memory the instance imports. */
interface KernelExports {
  mulPairs(w: number, rows: number, cols: number, g: number, pairs: number, y: number): void;
  blendDecode(q: number, m: number, n: number, limit: number, weight: number, above: number, below: number): number;
  transpose(src: number, rows: number, cols: number, dst: number): void;
  pairUp(src: number, len: number, count: number, dst: number): void;
}

/** Bytes kept for the blend weight table (4 x 8191 + 1 entries of 4 bytes, rounded up to 64 KiB pages). */
export const WEIGHTS_BYTES = 131072;
/** Where callers' arrays start. */
export const SCRATCH_AT = WEIGHTS_BYTES;
/** Memory above this is given back when a lease ends (common practice, no source: a few large tiles' worth). */
export const KEEP_BYTES = 16 * 1024 * 1024;
const PAGE = 65536;

/** This thread's kernels: an instance over a memory, both replaced when a use needs more memory. */
export class Kernels {
  /** The instance's functions. */
  fn!: KernelExports;
  /** Views of the memory (renewed with it). */
  f64 = new Float64Array(0);
  i32 = new Int32Array(0);
  /** Whether the blend weight table is in memory (at 0). */
  weightsLoaded = false;
  private leased = false;

  constructor(private readonly module: WebAssembly.Module) {
    this.renew(WEIGHTS_BYTES);
  }

  /** Bytes of memory the instance has now. */
  get memoryBytes(): number {
    return this.f64.byteLength;
  }

  /** A new memory of `bytes` (whole pages) and an instance over it; throws when either cannot be had. */
  private renew(bytes: number): void {
    const memory = new WebAssembly.Memory({ initial: Math.ceil(bytes / PAGE) });
    this.fn = new WebAssembly.Instance(this.module, { env: { memory } }).exports as unknown as KernelExports;
    this.f64 = new Float64Array(memory.buffer);
    this.i32 = new Int32Array(memory.buffer);
    this.weightsLoaded = false;
  }

  /**
   * Take the memory for one use of `bytes` bytes from {@link SCRATCH_AT}:
   * false (run the JavaScript) when another use holds it or no memory that
   * large can be had. Views taken before may be stale after this: use `f64`, `i32`.
   */
  lease(bytes: number): boolean {
    if (this.leased) return false;
    const need = SCRATCH_AT + bytes;
    if (need > this.memoryBytes) {
      try {
        this.renew(Math.max(need, 2 * this.memoryBytes));
      } catch {
        return false;
      }
    }
    this.leased = true;
    return true;
  }

  /** End a use; a memory larger than {@link KEEP_BYTES} is dropped for a small one. */
  release(): void {
    this.leased = false;
    if (this.memoryBytes <= KEEP_BYTES) return;
    try {
      this.renew(WEIGHTS_BYTES);
    } catch {
      // Keep the large one: it still works.
    }
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
    return new Kernels(compiled);
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
