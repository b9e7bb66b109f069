#!/usr/bin/env node
/**
 * The single-file ESM browser bundle of the decoding entry (src/decode.ts,
 * `rankfield/decode`), with its dependencies (fflate, @msgpack/msgpack)
 * inlined: dist/rankfield-decode.mjs, which a web page imports with
 * `<script type="module">` and no bundler or import map. Built by esbuild
 * (legal comments of the sources, where there are any, at the end).
 * Also the viewer's page script (src/view/page.ts) as
 * dist/rankfield-view.mjs, which imports the decoder from the first bundle
 * (./rankfield-decode.mjs) rather than holding a second copy of it.
 * Run by `npm run bundle` and by `npm ci` (prepare).
 */
import { dirname, join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { build } from 'esbuild';

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..');
/** What both bundles are: one ESM file for browsers, no bundler needed by the page. */
const common = { bundle: true, format: 'esm', platform: 'browser', target: 'es2022', legalComments: 'eof', logLevel: 'warning' };
const outfile = join(root, 'dist', 'rankfield-decode.mjs');
await build({ ...common, entryPoints: [join(root, 'src', 'decode.ts')], outfile });
console.log(`wrote ${outfile}`);

/** Resolve the page's imports of the decoding entry to the decoder bundle beside it. */
const decoderOutside = {
  name: 'decoder-outside',
  setup(b) {
    b.onResolve({ filter: /(^|\/)decode\.js$/ }, () => ({ path: './rankfield-decode.mjs', external: true }));
  },
};
const viewfile = join(root, 'dist', 'rankfield-view.mjs');
await build({ ...common, entryPoints: [join(root, 'src', 'view', 'page.ts')], outfile: viewfile, plugins: [decoderOutside] });
console.log(`wrote ${viewfile}`);
