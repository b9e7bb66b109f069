/**
 * The decoding entry point must run where Node's built-in modules do not
 * exist. Walk the import graph of the built dist/decode.js (every static and
 * dynamic import, followed through relative files) and fail on any Node
 * built-in (the list is Node's own `builtinModules`, plus any `node:`
 * specifier) and on any package other than the two browser-safe ones the
 * decoder needs.
 */
import { readFileSync } from 'node:fs';
import { builtinModules } from 'node:module';
import { join, relative } from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { ensureBuilt, ensureBundled, ROOT } from '../cli/helpers.js';
import { specifiers, walk } from '../import-walk.js';

/** Packages the decoder may import: both ship ESM builds without Node built-ins. */
const ALLOWED_PACKAGES = new Set(['fflate', '@msgpack/msgpack']);
const BUILTINS = new Set(builtinModules.flatMap((m) => [m, m.split('/')[0]]));

describe('the import graph of dist/decode.js', () => {
  beforeAll(() => ensureBuilt());

  it('finds the imports of a module (the walker itself)', () => {
    expect(specifiers(`import { a } from './a.js';\nexport * from "node:fs";\nimport 'zlib';\nconst m = await import('os');`).sort()).toEqual(['./a.js', 'node:fs', 'os', 'zlib']);
  });

  it('holds no Node built-in and no package but fflate and @msgpack/msgpack', () => {
    const { files, bare } = walk(join(ROOT, 'dist', 'decode.js'));
    // The decoder's own modules are all there: archive, container, tile decoding, the HTTP source.
    for (const f of ['archive.js', 'format/container.js', 'codec/tile-decode.js', 'io/http-source.js']) expect(files).toContain(join(ROOT, 'dist', f));
    const builtins = bare.filter(({ spec }) => spec.startsWith('node:') || BUILTINS.has(spec) || BUILTINS.has(spec.split('/')[0]));
    expect(builtins, `Node built-ins imported: ${builtins.map((b) => `${b.spec} (by ${b.from})`).join(', ')}`).toEqual([]);
    const packages = bare.filter(({ spec }) => !ALLOWED_PACKAGES.has(spec));
    expect(packages, `packages not known to be browser-safe: ${packages.map((b) => `${b.spec} (by ${b.from})`).join(', ')}`).toEqual([]);
  });

  it('reaches no encoder: no compressor, no tile or stream encoder, no archive writer', () => {
    const { files, bare } = walk(join(ROOT, 'dist', 'decode.js'));
    const writers = ['pack.js', 'codec/tile-encode.js', 'codec/pointwise-search.js', 'codec/code-encode.js', 'codec/section-write.js', 'codec/prepare.js', 'codec/plan-l2.js', 'codec/first-pass.js'].map((f) => join(ROOT, 'dist', f));
    expect(files.filter((f) => writers.includes(f)).map((f) => relative(ROOT, f))).toEqual([]);
    // DEFLATE is only ever inflated on this side, by the library's own inflater: fflate is not imported.
    expect(bare.filter((b) => b.spec === 'fflate')).toEqual([]);
  });

  it('uses no Node-only globals (Buffer, process, require, __dirname)', () => {
    const { files } = walk(join(ROOT, 'dist', 'decode.js'));
    for (const f of files) {
      // Strip comments so that prose about these names does not count.
      const code = readFileSync(f, 'utf8').replace(/\/\*[\s\S]*?\*\//g, '').replace(/\/\/.*$/gm, '');
      expect(code, relative(ROOT, f)).not.toMatch(/\b(?:Buffer|process|require|__dirname|__filename)\s*[.(]/);
    }
  });
});

describe('the single-file browser bundle', () => {
  beforeAll(() => ensureBundled());

  it('dist/rankfield-decode.mjs imports nothing and exports the decoding entry\'s names', async () => {
    const text = readFileSync(join(ROOT, 'dist', 'rankfield-decode.mjs'), 'utf8');
    expect(specifiers(text)).toEqual([]);
    expect(text).not.toMatch(/\brequire\s*\(/);
    // Loaded as an ES module here too, it offers what rankfield/decode offers.
    const bundle = (await import(join(ROOT, 'dist', 'rankfield-decode.mjs'))) as Record<string, unknown>;
    const entry = (await import(join(ROOT, 'dist', 'decode.js'))) as Record<string, unknown>;
    expect(Object.keys(bundle).sort()).toEqual(Object.keys(entry).sort());
  });
});
