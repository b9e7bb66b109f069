/**
 * The decoder's WebAssembly module (entry file): the binary coder's
 * integer decoder and the blend predictor's walk. Compiled by `npm run
 * kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts; plain
 * functions over addresses in the memory the module imports, laid out and
 * copied in and out by src/wasm/*.ts.
 */
export { blendDecode } from './blend';
export { decodeInts, failedAt, finalPos } from './ints';
