/** Walking the import graph of built modules (dist/), for the tests that say what a module loads. */
import { existsSync, readFileSync } from 'node:fs';
import { dirname, relative, resolve } from 'node:path';
import { ROOT } from './cli/helpers.js';

/** Specifiers of every import and re-export in a module's text (tsc output: one per statement); with `dynamic`, of `import()` calls too. */
export function specifiers(text: string, dynamic = true): string[] {
  const out: string[] = [];
  const patterns = [/\b(?:import|export)\s[^'";]*?\bfrom\s*['"]([^'"]+)['"]/g, /\bimport\s*['"]([^'"]+)['"]/g];
  if (dynamic) patterns.push(/\bimport\s*\(\s*['"]([^'"]+)['"]\s*\)/g);
  for (const p of patterns) for (const m of text.matchAll(p)) out.push(m[1]);
  return out;
}

/**
 * Every module reachable from `entry` (static and, with `dynamic`, dynamic
 * imports, followed through relative files), and every bare specifier
 * imported along the way (with who imports it).
 */
export function walk(entry: string, dynamic = true): { files: string[]; bare: { spec: string; from: string }[] } {
  const seen = new Set<string>();
  const bare: { spec: string; from: string }[] = [];
  const todo = [entry];
  while (todo.length > 0) {
    const file = todo.pop()!;
    if (seen.has(file)) continue;
    seen.add(file);
    for (const spec of specifiers(readFileSync(file, 'utf8'), dynamic)) {
      if (spec.startsWith('.') || spec.startsWith('/')) {
        const target = resolve(dirname(file), spec);
        if (!existsSync(target)) throw new Error(`${relative(ROOT, file)} imports '${spec}', which does not exist`);
        todo.push(target);
      } else bare.push({ spec, from: relative(ROOT, file) });
    }
  }
  return { files: [...seen], bare };
}
