/** Tests that choose the WebAssembly kernels or the JavaScript (src/wasm/kernels.ts), and put back what was in force after the file or block. */
import { afterAll, beforeAll } from 'vitest';
import { setKernelMode } from '../src/wasm/kernels.js';

/** Run the enclosing file's or describe block's tests with kernels in `mode`; the mode before is restored after them. */
export function useKernelMode(mode: 'auto' | 'js'): void {
  let was: 'auto' | 'js' = 'auto';
  beforeAll(() => {
    was = setKernelMode(mode);
  });
  afterAll(() => {
    setKernelMode(was);
  });
}

/** `run` on the JavaScript path, then with the kernels ('auto', which stays in force after): both results. */
export function onBothPaths<T>(run: () => T): { js: T; wasm: T } {
  try {
    setKernelMode('js');
    const js = run();
    setKernelMode('auto');
    return { js, wasm: run() };
  } finally {
    setKernelMode('auto');
  }
}
