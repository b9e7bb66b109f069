/**
 * The WebAssembly kernels against their JavaScript versions, in one
 * process: the range finder's product (G multiply-adds a second, sketch
 * copies included), the blend predictor's decoding walk, the binary
 * coder's and the symbol coder's decoders, the low-rank product of a
 * tile's reconstruction, and the pointwise encoder's check of a candidate
 * (settleCodes: its low-rank part, codes, exceptions and predictor sums)
 * (ns a cell, copies in and out included). Medians of tinybench runs; each kernel's
 * speed-up is the ratio of the two medians. Prints a table; writes
 * nothing. `npm run build && npx tsc -p tsconfig.bench.json && node
 * bench/dist/bench/kernels.js`.
 */
import { Bench } from 'tinybench';
import { decodeInts } from '../src/codec/code-decode.js';
import { encodeInts } from '../src/codec/code-encode.js';
import { decodeSymbols } from '../src/codec/code-symbols.js';
import { encodeSymbols } from '../src/codec/code-symbols-encode.js';
import { ensureSvd, prepareTile } from '../src/codec/prepare.js';
import { lowRank, predict, Predictor, PREDICTOR_SUMS, unpredict } from '../src/codec/reconstruct.js';
import { settleCodes } from '../src/codec/settle.js';
import { binary32Below } from '../src/codec/steps.js';
import { pointwiseFactors } from '../src/codec/tile-encode.js';
import { matrixProducts } from '../src/linalg/product.js';
import { setKernelMode } from '../src/wasm/kernels.js';
import { xorshift32 } from './rng.js';

/** Median milliseconds of `fn` over at least 20 runs and 400 ms, in kernel mode `mode`. */
async function median(mode: 'auto' | 'js', fn: () => void): Promise<number> {
  setKernelMode(mode);
  const b = new Bench({ iterations: 20, time: 400, warmup: true, throws: true });
  b.add('task', fn);
  await b.run();
  const r = b.tasks[0].result;
  if (r.state !== 'completed') throw new Error(`timing did not complete (${r.state})`);
  return r.latency.p50;
}

/** A smooth surface with a little noise, as integers: residual-like codes whose predictions vary. */
function surface(m: number, n: number, seed: number): Int32Array {
  const rnd = xorshift32(seed);
  return Int32Array.from({ length: m * n }, (_, c) => Math.round(300 * Math.sin(0.05 * Math.floor(c / n)) * Math.cos(0.07 * (c % n)) + 4 * rnd()));
}

const rows: string[] = ['| kernel | case | JavaScript | WebAssembly | speed-up |', '|---|---|--:|--:|--:|'];
for (const side of [256, 512]) {
  for (const l of [24, 56]) {
    const rnd = xorshift32(side + l);
    const w = Float64Array.from({ length: side * side }, () => rnd() - 0.5);
    const g = Float64Array.from({ length: side * l }, () => rnd() - 0.5);
    const y = new Float64Array(side * l);
    const gmadds = (ms: number): number => (side * side * l) / ms / 1e6;
    const time = (mode: 'auto' | 'js'): Promise<number> => {
      setKernelMode(mode);
      const p = matrixProducts(w, side, side, l, false);
      return median(mode, () => p.times(g, y)).finally(() => p.done());
    };
    const js = await time('js');
    const wasm = await time('auto');
    rows.push(`| product | ${side} x ${side}, l = ${l} | ${gmadds(js).toFixed(2)} G/s | ${gmadds(wasm).toFixed(2)} G/s | ${(js / wasm).toFixed(2)}x |`);
  }
}
for (const [m, n] of [
  [61, 87],
  [256, 256],
]) {
  const q = surface(m, n, m);
  const d = predict(q, m, n, 2 ** 30, Predictor.Blend);
  if (d === null) throw new Error('blend prediction failed');
  const work = new Int32Array(m * n);
  const walk = (): void => {
    work.set(d);
    if (!unpredict(work, m, n, 2 ** 30, Predictor.Blend)) throw new Error('blend walk failed');
  };
  const ns = (ms: number): string => `${((1e6 * ms) / (m * n)).toFixed(1)} ns`;
  const js = await median('js', walk);
  const wasm = await median('auto', walk);
  rows.push(`| blend walk | ${m} x ${n} | ${ns(js)} | ${ns(wasm)} | ${(js / wasm).toFixed(2)}x |`);
  const pd = predict(q, m, n, 2 ** 30, Predictor.Lorenzo);
  if (pd === null) throw new Error('prediction failed');
  const bytes = encodeInts(pd, m, n, null);
  const out = new Int32Array(m * n);
  const jsInts = await median('js', () => decodeInts(bytes, m, n, null, out));
  const wasmInts = await median('auto', () => decodeInts(bytes, m, n, null, out));
  rows.push(`| integer decoder | ${m} x ${n}, Lorenzo residual, ${bytes.length} bytes | ${ns(jsInts)} | ${ns(wasmInts)} | ${(jsInts / wasmInts).toFixed(2)}x |`);
  // The symbol coder's domain: dense residuals (the same surface with more noise, few zeros).
  const dense = predict(surface(m, n, m + 1).map((x, c) => x + Math.round(40 * Math.sin(c * 1.7))), m, n, 2 ** 30, Predictor.Lorenzo);
  if (dense === null) throw new Error('prediction failed');
  const sym = encodeSymbols(dense, m, n, null);
  const jsSym = await median('js', () => decodeSymbols(sym, m, n, null, out));
  const wasmSym = await median('auto', () => decodeSymbols(sym, m, n, null, out));
  rows.push(`| symbol decoder | ${m} x ${n}, dense Lorenzo residual, ${sym.length} bytes | ${ns(jsSym)} | ${ns(wasmSym)} | ${(jsSym / wasmSym).toFixed(2)}x |`);
  for (const r of [1, 2, 4, 8, 16]) {
    const rnd = xorshift32(r * m);
    const l = Float64Array.from({ length: m * r }, () => rnd() - 0.5);
    const w = Float64Array.from({ length: r * n }, () => rnd() - 0.5);
    const acc = new Float64Array(m * n);
    const jsLow = await median('js', () => lowRank(l, w, m, n, r, 0.5, acc));
    const wasmLow = await median('auto', () => lowRank(l, w, m, n, r, 0.5, acc));
    rows.push(`| low-rank product | ${m} x ${n}, rank ${r} | ${ns(jsLow)} | ${ns(wasmLow)} | ${(jsLow / wasmLow).toFixed(2)}x |`);
  }
  // A binary32 tile of the surface, checked at a bound of 1/20 of a unit with its own rank-4 factors, as the pointwise search does.
  const tile = prepareTile(Float32Array.from(surface(m, n, m + 2)), m, n, 'f32', null, 0.05);
  ensureSvd(tile, 4);
  const factors = pointwiseFactors(tile, 4, 0.05);
  if (factors === null) throw new Error('no rank-4 factors');
  const codes = new Int32Array(m * n);
  const check = (): void => {
    settleCodes(tile, factors, tile.center, 0.05, binary32Below(0.1), codes, [], new Float64Array(PREDICTOR_SUMS));
  };
  const jsCheck = await median('js', check);
  const wasmCheck = await median('auto', check);
  rows.push(`| candidate check | ${m} x ${n}, f32, rank 4 | ${ns(jsCheck)} | ${ns(wasmCheck)} | ${(jsCheck / wasmCheck).toFixed(2)}x |`);
}
setKernelMode(undefined);
console.log(rows.join('\n'));
