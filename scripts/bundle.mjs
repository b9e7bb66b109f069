#!/usr/bin/env node
/**
 * The single-file ESM browser bundle of the decoding entry (src/decode.ts,
 * `rankfield/decode`), with its dependencies (fflate, @msgpack/msgpack)
 * inlined: dist/rankfield-decode.mjs, which a web page imports with
 * `<script type="module">` and no bundler or import map. Built by esbuild
 * (legal comments of the sources, where there are any, at the end).
 * Run by `npm run bundle` and by `npm ci` (prepare).
 */
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { build } from 'esbuild';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const outfile = join(root, 'dist', 'rankfield-decode.mjs');
await build({
  entryPoints: [join(root, 'src', 'decode.ts')],
  outfile,
  bundle: true,
  format: 'esm',
  platform: 'browser',
  target: 'es2022',
  legalComments: 'eof',
  logLevel: 'warning',
});
console.log(`wrote ${outfile}`);
