/**
 * The encoder's module for the symbol coder (entry file): its encoder of
 * residual streams, and the error tally of the encoder's check of each
 * finished tile (kernels/tally.ts), in a module of its own so that each
 * stays under the size src/wasm/kernels.ts gives. Encoder-side only. Compiled by `npm run
 * kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts; laid out
 * and copied in and out by src/wasm/finish.ts.
 */
export { encodeSymbols, rawWritten } from './symbols-encode';
export { written } from './range-sink';
export { tallyCells } from './tally';
