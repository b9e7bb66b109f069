/**
 * The encoder's WebAssembly module (entry file): the pointwise check of a
 * candidate, band by band (the low-rank product, the field layer's term,
 * the codes, the exceptions and the predictors' rough bits). Compiled by
 * `npm run kernels` (scripts/kernels.mjs) into src/wasm/kernels-bytes.ts;
 * laid out and copied in and out by src/wasm/settle.ts. Readers never load
 * it.
 */
export { settleBand } from './settle';
