/**
 * The encoder's finishing module (entry file): the blend predictor's walk
 * as the encoder takes it (differences of known codes, predictions for
 * missing cells) and the plain predictors' differences (the binary
 * coder's encoder is in kernels/finish-ints.ts). Encoder-side only: the browser's decoding bundle does
 * not load it. Compiled by `npm run kernels` (scripts/kernels.mjs) into
 * src/wasm/kernels-bytes.ts; plain functions over addresses in the memory
 * the module imports, laid out and copied in and out by src/wasm/finish.ts.
 */
export { blendEncode } from './blend-encode';
export { predictPlain } from './predict-encode';
