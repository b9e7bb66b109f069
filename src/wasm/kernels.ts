/**
 * The WebAssembly kernels (kernels/*.ts, compiled into ./kernels-bytes.ts),
 * in fifteen modules: the linear-algebra module, with the range finder's
 * matrix product (and the copies that lay out its operands) and the
 * low-rank product of every tile's reconstruction, with the rest of the
 * decoder's reconstruction (which readers load too);
 * the decoder's module, with the blend predictor's decoding walk and the
 * binary coder's decoder; the symbol coder's decoder in a module of its
 * own (the decoder's module is near the size limit below); the encoder's
 * module, with the pointwise check of a candidate (readers never load it);
 * the encoder's finishing modules (src/wasm/finish.ts), one with the
 * predictors' differences (the blend's walk over known codes, the plain
 * predictors), one with the binary coder's encoder, one with the blend's walk
 * four cells at a time, one with the symbol coder's encoder and the
 * check's error tally; the encoder's modules for L2 bounds, one with the
 * residual search's walks (src/wasm/rdo.ts), which imports the
 * JavaScript's Math.log2 (so that its values are the JavaScript's), one
 * with those walks' floor and the plain predictor's walks of several
 * weights in one pass (the same import), one with the Gram matrix of
 * the plan's spectra (src/wasm/gram.ts); the encoder's module for tiles
 * with missing cells (the check's choice of predictor, src/wasm/masked.ts,
 * and the harmonic fill, src/wasm/fill.ts);
 * the encoder's module with the range finder's orthonormalization
 * (src/linalg/product.ts runs it in the memory its products hold); the
 * encoder's refit of a candidate's right factor (src/wasm/refit.ts); and
 * the CRC-32 of long inputs, both sides' (src/wasm/crc.ts). Each kernel is
 * bit for bit the same as its JavaScript version, which stays the fallback.
 * Instantiated synchronously, lazily, once per thread (module state, and
 * every worker thread has its own): each module is under 4 KiB,
 * below the size browsers allow to compile synchronously on the main thread
 * (4 KiB in Chromium: from memory). Where WebAssembly or its 128-bit SIMD
 * is missing, or compiling or instantiating fails (a page's content
 * security policy, say), {@link kernels} gives null and callers run the
 * JavaScript. The environment variable RANKFIELD_KERNELS=js (read where a
 * `process` global exists) forces the JavaScript everywhere, and
 * {@link setKernelMode} does so for tests.
 *
 * Memory: the instances of every module import one memory the loader made,
 * sized for the largest use so far. When a use needs more, the loader makes
 * a new, larger memory ({@link KEEP_BYTES}, or what the use needs when
 * that is more) and new instances over it, and never grows a memory in place: growing detaches the memory's old
 * ArrayBuffer, and once any ArrayBuffer has been detached V8 checks every
 * typed-array access of optimized code for detachment (its "array buffer
 * detaching protector", from memory): measured here, truncatedSvd of a
 * 64 x 64 matrix in JavaScript went from 1326 to 1860 us a call after one
 * 8-byte buffer was detached (scratch measurement, Node 20). The first
 * {@link WEIGHTS_BYTES} bytes hold the blend predictor's weight table once
 * it is loaded; callers lay out their arrays from {@link SCRATCH_AT}, under
 * a lease ({@link Kernels.lease}): one user at a time, a nested user gets
 * none and runs the JavaScript. When a lease ends with the memory above
 * {@link KEEP_BYTES}, the memory is dropped for a small one (the next use
 * that needs more makes one of KEEP_BYTES again).
 */

/** Bytes kept for the blend weight table (4 x 8191 + 1 entries of 4 bytes, rounded up to 64 KiB pages). */
export const WEIGHTS_BYTES = 131072;
/** Where callers' arrays start. */
export const SCRATCH_AT = WEIGHTS_BYTES;
/**
 * The memory a use that needs more than there is gets at once, and memory
 * above this is given back when a lease ends (common practice, no source:
 * a few large tiles' worth). 32 MiB holds a 1024 x 1024 tile's
 * range-finder product (16.7 MiB while it kept a transposed copy of the
 * tile, 8.6 MiB since) and the encoder's kernels: at 16 MiB
 * that product's memory was given back every tile and made anew (with
 * every use after it, 88 new memories in one pack of bench/'s large field
 * at rel:1e-3, 9 at 32 MiB; the pack 3258 -> 2996 ms, medians of 6
 * alternating, scratch/one-pack.mjs, one thread).
 */
export const KEEP_BYTES = 32 * 1024 * 1024;
const PAGE = 65536;

/** Compiled modules by their base64 text (kept for the thread's life: a new instance of one is cheap); null where one does not compile. */
const compiled = new Map<string, WebAssembly.Module | null>();

/** This thread's kernels: a memory and the instances over it, all replaced when a use needs more memory. */
export class Kernels {
  /** Views of the memory (renewed with it). */
  f64 = new Float64Array(0);
  f32 = new Float32Array(0);
  i32 = new Int32Array(0);
  u8 = new Uint8Array(0);
  /** Whether the blend weight table is in memory (at 0). */
  weightsLoaded = false;
  private memory!: WebAssembly.Memory;
  /** Instances over this memory, by module; null where one cannot be had. */
  private instances = new Map<string, unknown>();
  private leased = false;

  constructor() {
    this.renew(WEIGHTS_BYTES);
  }

  /** Bytes of memory there are now. */
  get memoryBytes(): number {
    return this.u8.byteLength;
  }

  /** A new memory of `bytes` (whole pages); instances are made anew over it when asked for. Throws when it cannot be had. */
  private renew(bytes: number): void {
    this.memory = new WebAssembly.Memory({ initial: Math.ceil(bytes / PAGE) });
    this.f64 = new Float64Array(this.memory.buffer);
    this.f32 = new Float32Array(this.memory.buffer);
    this.i32 = new Int32Array(this.memory.buffer);
    this.u8 = new Uint8Array(this.memory.buffer);
    this.instances.clear();
    this.weightsLoaded = false;
  }

  /**
   * The exports of the module `base64` (one of ./kernels-bytes.ts) over
   * this memory, typed as `T` by the caller; null when it does not compile
   * or instantiate here. Take it after {@link Kernels.lease}, which may
   * renew the memory and so the instances.
   */
  module<T>(base64: string): T | null {
    let inst = this.instances.get(base64);
    if (inst === undefined) {
      let mod = compiled.get(base64);
      if (mod === undefined) {
        try {
          mod = new WebAssembly.Module(decodeBase64(base64));
        } catch {
          mod = null; // no SIMD, or compilation refused
        }
        compiled.set(base64, mod);
      }
      inst = null;
      if (mod !== null) {
        try {
          inst = new WebAssembly.Instance(mod, { env: { memory: this.memory, log2: Math.log2 } }).exports;
        } catch {
          inst = null;
        }
      }
      this.instances.set(base64, inst);
    }
    return inst as T | null;
  }

  /**
   * Take the memory for one use of `bytes` bytes from {@link SCRATCH_AT}:
   * false (run the JavaScript) when another use holds it or no memory that
   * large can be had. Views taken before may be stale after this: use `f64`, `i32`, `u8`.
   */
  lease(bytes: number): boolean {
    if (this.leased) return false;
    const need = SCRATCH_AT + bytes;
    if (need > this.memoryBytes) {
      // KEEP_BYTES at once (or what the use needs, when more): pages of a memory cost nothing until they are
      // touched, while each new memory's pages are touched anew (page faults, slow on some virtual machines).
      // Growing by doubling made a new memory at each step, 128 KiB to 32 MiB, in every thread: a worker
      // thread started for a pack touched each step's pages. packAsync on 2 threads of bench/'s 4096 x 4096
      // field at rel:1e-3: 40456 -> 27916 page faults, 301 -> 234 ms of system time (medians of 5, alternated
      // with the doubling build, scratch/ab.mjs). Past KEEP_BYTES a memory is dropped at the lease's end (see
      // release), so only a use that needs more gets more.
      if (!this.renewTo(Math.max(need, KEEP_BYTES)) && !this.renewTo(need)) return false;
    }
    this.leased = true;
    return true;
  }

  /** {@link renew}, false when the memory cannot be had. */
  private renewTo(bytes: number): boolean {
    try {
      this.renew(bytes);
      return true;
    } catch {
      return false;
    }
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

/** This thread's kernels; null when there is no WebAssembly; undefined before the first try. */
let current: Kernels | null | undefined;
/** 'js' forces the JavaScript; 'auto' uses the kernels where they instantiate. */
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

/** This thread's kernels, made on first use; null when the JavaScript is to run. */
export function kernels(): Kernels | null {
  if (mode === undefined) mode = envMode();
  if (mode === 'js') return null;
  if (current === undefined) {
    try {
      current = typeof WebAssembly === 'object' ? new Kernels() : null;
    } catch {
      current = null;
    }
  }
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
