/**
 * The WebAssembly kernels' module and loader (src/wasm/kernels.ts): the
 * committed bytes are what kernels/ compiles to, the module stays small
 * enough for browsers to compile synchronously, and the JavaScript is used
 * where the kernels are switched off or WebAssembly is missing.
 */
import { execFileSync } from 'node:child_process';
import { join } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { CRC_KERNELS, DECODE_KERNELS, ENCODE_KERNELS, FINISH_BLEND_KERNELS, FINISH_INTS_KERNELS, FINISH_KERNELS, FINISH_SYMBOL_KERNELS, GRAM_KERNELS, LINALG_KERNELS, MASKED_KERNELS, QR_KERNELS, RDO_FLOOR_KERNELS, RDO_KERNELS, REFIT_KERNELS, SYMBOL_KERNELS } from '../../src/wasm/kernels-bytes.js';
import { KEEP_BYTES, kernels, SCRATCH_AT, setKernelMode } from '../../src/wasm/kernels.js';
import { ensureBuilt, ROOT } from '../cli/helpers.js';
import { useKernelMode } from '../kernel-mode.js';

/** Run a module snippet against dist/ in a child node with `flags` and `env`; its stdout. */
function childNode(code: string, flags: string[], env: Record<string, string>): string {
  return execFileSync(process.execPath, [...flags, '--input-type=module', '-e', code], { cwd: ROOT, env: { ...process.env, ...env }, encoding: 'utf8' }).trim();
}

/** Prints whether the kernels are there, and truncatedSvd's leading singular values of a fixed 40 x 30 matrix. */
const PROBE = `
import { kernels } from './dist/wasm/kernels.js';
import { truncatedSvd } from './dist/linalg/truncated.js';
const a = Float64Array.from({ length: 1200 }, (_, c) => Math.sin(c * 0.37) + Math.cos(0.05 * c * (c % 7)));
console.log(JSON.stringify({ kernels: kernels() !== null, s: Array.from(truncatedSvd(a, 40, 30, 3).s) }));
`;

useKernelMode('auto');
beforeAll(() => ensureBuilt());

describe('the kernels module', () => {
  // Compiling with AssemblyScript and Binaryen at -O3 takes 4-5 s idle, several times that on a busy machine.
  it('is what kernels/ compiles to (scripts/kernels.mjs --check)', { timeout: 120_000 }, () => {
    const out = execFileSync(process.execPath, [join(ROOT, 'scripts', 'kernels.mjs'), '--check'], { cwd: ROOT, encoding: 'utf8' });
    expect(out).toMatch(/up to date/);
  });

  it('is fifteen modules, each under 4 KiB, so browsers compile them synchronously on the main thread (Chromium\'s limit for new WebAssembly.Module: from memory)', () => {
    for (const base64 of [DECODE_KERNELS, LINALG_KERNELS, SYMBOL_KERNELS, ENCODE_KERNELS, FINISH_KERNELS, FINISH_INTS_KERNELS, FINISH_SYMBOL_KERNELS, FINISH_BLEND_KERNELS, RDO_KERNELS, RDO_FLOOR_KERNELS, GRAM_KERNELS, MASKED_KERNELS, QR_KERNELS, REFIT_KERNELS, CRC_KERNELS]) {
      const bytes = Array.from(atob(base64), (ch) => ch.charCodeAt(0));
      expect(bytes.length).toBeLessThan(4096);
      // The binary format's magic and version 1 (WebAssembly core specification, 5.5.16 Modules).
      expect(bytes.slice(0, 8)).toEqual([0, 0x61, 0x73, 0x6d, 1, 0, 0, 0]);
    }
  });

  it('is instantiated once per thread and switched off by setKernelMode', () => {
    const k = kernels();
    expect(k).not.toBeNull();
    expect(kernels()).toBe(k);
    const linalg = k?.module(LINALG_KERNELS);
    expect(linalg).not.toBeNull();
    expect(k?.module(LINALG_KERNELS)).toBe(linalg);
    expect(k?.module(DECODE_KERNELS)).not.toBe(linalg);
    setKernelMode('js');
    expect(kernels()).toBeNull();
    setKernelMode('auto');
    expect(kernels()).toBe(k);
  });

  it('makes one memory of KEEP_BYTES for uses of up to that and keeps it, so the next such use finds it', () => {
    const k = kernels()!;
    // A use of a little more than half the kept size, from a memory smaller than that.
    const bytes = KEEP_BYTES / 2 + 65536;
    expect(k.lease(bytes)).toBe(true);
    const made = k.memoryBytes;
    expect(made).toBeGreaterThanOrEqual(SCRATCH_AT + bytes);
    expect(made).toBe(KEEP_BYTES);
    const view = k.u8;
    k.release();
    // Kept, not given back and made anew: the same memory (its view still attached) for the next use.
    expect(k.lease(bytes)).toBe(true);
    expect(k.memoryBytes).toBe(made);
    expect(k.u8).toBe(view);
    k.release();
  });

  it('is switched off by RANKFIELD_KERNELS=js and missing without WebAssembly, with the same singular values', () => {
    const on = JSON.parse(childNode(PROBE, [], { RANKFIELD_KERNELS: '' }));
    const off = JSON.parse(childNode(PROBE, [], { RANKFIELD_KERNELS: 'js' }));
    // V8's --noexpose-wasm removes the WebAssembly global, as in an engine without it.
    const none = JSON.parse(childNode(PROBE, ['--noexpose-wasm'], { RANKFIELD_KERNELS: '' }));
    expect([on.kernels, off.kernels, none.kernels]).toEqual([true, false, false]);
    expect(on.s.length).toBe(3);
    expect(off.s).toEqual(on.s);
    expect(none.s).toEqual(on.s);
  });
});
