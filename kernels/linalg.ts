/**
 * The linear-algebra WebAssembly module (entry file): the range finder's
 * product and the copies that lay out its operands (the encoder's), and the
 * low-rank product of a tile's reconstruction (both sides') with the rest
 * of the decoder's reconstruction (residual, rounding). Compiled by
 * `npm run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts;
 * plain functions over addresses in the memory the module imports, laid out
 * and copied in and out by src/linalg/product.ts and src/wasm/lowrank.ts.
 */
export { mulPairs, mulTPairs } from './product';
export { pairUp, unpair } from './layout';
export { finishBand, lowRank } from './lowrank';
