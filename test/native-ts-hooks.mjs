/**
 * Module hooks (node:module customization hooks, Node >= 20.6) that let the
 * test processes import the TypeScript sources with Node's own loader
 * instead of vitest's module runner: a relative import of `x.js` that does
 * not exist resolves to `x.ts` (the sources import each other by their
 * compiled names), and a `.ts` file is turned into JavaScript by esbuild's
 * transform (types removed, nothing else changed), with an inline source
 * map so that stack traces name the TypeScript lines.
 *
 * Why: the module runner reaches every imported binding through a getter on
 * a module object, and the codec's kernels call across modules in their
 * inner loops; the same tests take about half the CPU time under Node's
 * loader (vega.test.ts: 27.8 s of CPU with the module runner, 16.1 s here).
 *
 * Each test process (several, and one per file for the files vitest.config.ts
 * isolates) would transform again every source it imports (about 110 files
 * for the command line). The
 * JavaScript is therefore kept in node_modules/.cache/rankfield-native-ts/
 * under a hash of the esbuild version, the options, the file's path and its
 * text, so a changed file (or a new esbuild) is transformed anew and an
 * unchanged one is read back. Importing src/cli/main.ts so took 1.13 s of CPU
 * with a transform per file and 0.63 s with the cache (measured on this
 * 2-core machine, load about 4); esbuild itself is loaded only on a miss. A
 * cache that cannot be written (read-only checkout) is skipped.
 */
import { createHash } from 'node:crypto';
import { mkdirSync, readFileSync, renameSync, rmSync, writeFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import { fileURLToPath } from 'node:url';

const OPTIONS = { loader: 'ts', format: 'esm', target: 'node20', sourcemap: 'inline' };
const CACHE = fileURLToPath(new URL('../node_modules/.cache/rankfield-native-ts/', import.meta.url));
const SALT = `${createRequire(import.meta.url)('esbuild/package.json').version}\0${JSON.stringify(OPTIONS)}`;

export async function resolve(specifier, context, next) {
  try {
    return await next(specifier, context);
  } catch (e) {
    const relative = specifier.startsWith('.') || specifier.startsWith('/') || specifier.startsWith('file:');
    if (e?.code === 'ERR_MODULE_NOT_FOUND' && relative && specifier.endsWith('.js')) return next(`${specifier.slice(0, -3)}.ts`, context);
    throw e;
  }
}

export async function load(url, context, next) {
  const bare = url.split('?')[0];
  if (!bare.startsWith('file:') || !bare.endsWith('.ts')) return next(url, context);
  const path = fileURLToPath(bare);
  const text = readFileSync(path, 'utf8');
  const file = `${CACHE}${createHash('sha256').update(SALT).update('\0').update(path).update('\0').update(text).digest('hex')}.js`;
  let code;
  try {
    code = readFileSync(file, 'utf8');
  } catch {
    const { transformSync } = await import('esbuild');
    code = transformSync(text, { ...OPTIONS, sourcefile: path }).code;
    store(file, code);
  }
  return { format: 'module', source: code, shortCircuit: true };
}

/** Write a cache entry whole or not at all (a temporary name, then a rename): test processes run at once. */
function store(file, code) {
  const tmp = `${file}.${process.pid}.tmp`;
  try {
    mkdirSync(CACHE, { recursive: true });
    writeFileSync(tmp, code);
    renameSync(tmp, file);
  } catch {
    rmSync(tmp, { force: true });
  }
}
