/**
 * The WebAssembly kernels of rankfield's two hottest loops, compiled by
 * `npm run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts.
 * Plain functions over addresses in the module's memory: the loader
 * (src/wasm/kernels.ts) lays the arrays out and copies them in and out.
 */
export { mulPairs } from './product';
export { blendDecode } from './blend';
export { pairUp, transpose } from './layout';
