/**
 * The encoder's module for the blend predictor's walk four cells at a time
 * (grids of small codes without a class map; kernels/blend-small.ts), in a
 * module of its own so that each stays under the size src/wasm/kernels.ts
 * gives. Encoder-side only. Compiled by `npm run kernels`
 * (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts; laid out and
 * copied in and out by src/wasm/finish.ts.
 */
export { blendEncodeSmall } from './blend-small';
