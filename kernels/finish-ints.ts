/**
 * The encoder's module for the binary coder (entry file): its encoder of
 * coded integer streams (kernels/ints-encode.ts), in a module of its own so
 * that it stays under the size src/wasm/kernels.ts gives. Encoder-side
 * only: the browser's decoding bundle does not load it. Compiled by `npm
 * run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts; laid
 * out and copied in and out by src/wasm/finish.ts.
 */
export { encodeInts, written } from './ints-encode';
