// The structure of src/ as the TypeScript compiler sees it: the import graph between src files,
// its cycles (strongly connected components of more than one file, found with Tarjan's algorithm),
// and every function longer than a limit. Reads files only; prints to stdout.
//
//   node scripts/structure.mjs                 # cycles and functions over 60 lines
//   node scripts/structure.mjs --graph         # also every edge, "from -> to"
//   node scripts/structure.mjs --lines 40      # another limit for functions
//   node scripts/structure.mjs --types         # cycles through type-only imports too
import { readdirSync, readFileSync } from 'node:fs';
import { dirname, join, relative, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import ts from 'typescript';

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..');
const SRC = join(ROOT, 'src');
const args = process.argv.slice(2);
const showGraph = args.includes('--graph');
const limitAt = args.indexOf('--lines');
const LIMIT = limitAt >= 0 ? Number(args[limitAt + 1]) : 60;

function tsFiles(dir) {
  return readdirSync(dir, { withFileTypes: true }).flatMap((e) => (e.isDirectory() ? tsFiles(join(dir, e.name)) : e.name.endsWith('.ts') ? [join(dir, e.name)] : []));
}

const files = tsFiles(SRC).sort();
const name = (f) => relative(SRC, f);
const graph = new Map(files.map((f) => [f, new Set()]));
const longFunctions = [];

for (const file of files) {
  const source = ts.createSourceFile(file, readFileSync(file, 'utf8'), ts.ScriptTarget.ES2022, true);
  const edge = (spec, typeOnly) => {
    if (!spec.startsWith('.')) return;
    const target = resolve(dirname(file), spec.replace(/\.js$/, '.ts'));
    // Type-only imports vanish from the emitted code and cannot make a cycle at run time; they are still listed with --graph.
    if (graph.has(target)) graph.get(file).add(typeOnly ? `type:${target}` : target);
  };
  const visit = (node) => {
    if ((ts.isImportDeclaration(node) || ts.isExportDeclaration(node)) && node.moduleSpecifier && ts.isStringLiteral(node.moduleSpecifier)) {
      const typeOnly = ts.isImportDeclaration(node) ? !!node.importClause?.isTypeOnly : node.isTypeOnly;
      edge(node.moduleSpecifier.text, typeOnly);
    } else if (ts.isCallExpression(node) && node.expression.kind === ts.SyntaxKind.ImportKeyword && node.arguments[0] && ts.isStringLiteral(node.arguments[0])) {
      edge(node.arguments[0].text, false);
    }
    const isFunction = ts.isFunctionDeclaration(node) || ts.isMethodDeclaration(node) || ts.isFunctionExpression(node) || ts.isArrowFunction(node) || ts.isConstructorDeclaration(node);
    if (isFunction && node.body) {
      const first = source.getLineAndCharacterOfPosition(node.getStart(source)).line + 1;
      const last = source.getLineAndCharacterOfPosition(node.end).line + 1;
      const label = node.name?.getText(source) ?? (ts.isVariableDeclaration(node.parent) ? node.parent.name.getText(source) : ts.isPropertyAssignment(node.parent) ? node.parent.name.getText(source) : '(anonymous)');
      if (last - first + 1 > LIMIT) longFunctions.push({ where: `${name(file)}:${first}`, label, lines: last - first + 1 });
    }
    ts.forEachChild(node, visit);
  };
  visit(source);
}

// Tarjan's strongly connected components over the run-time edges (with --types, over type-only imports too).
const withTypes = args.includes('--types');
const runEdges = (f) => [...graph.get(f)].filter((t) => withTypes || !t.startsWith('type:')).map((t) => t.replace(/^type:/, ''));
let counter = 0;
const index = new Map();
const low = new Map();
const stack = [];
const onStack = new Set();
const components = [];
function connect(v) {
  index.set(v, counter);
  low.set(v, counter++);
  stack.push(v);
  onStack.add(v);
  for (const w of runEdges(v)) {
    if (!index.has(w)) {
      connect(w);
      low.set(v, Math.min(low.get(v), low.get(w)));
    } else if (onStack.has(w)) low.set(v, Math.min(low.get(v), index.get(w)));
  }
  if (low.get(v) === index.get(v)) {
    const component = [];
    let w;
    do {
      w = stack.pop();
      onStack.delete(w);
      component.push(w);
    } while (w !== v);
    if (component.length > 1) components.push(component.map(name).sort());
  }
}
for (const f of files) if (!index.has(f)) connect(f);

const edgeCount = files.reduce((n, f) => n + graph.get(f).size, 0);
console.log(`${files.length} files in src, ${edgeCount} import edges between them (${files.reduce((n, f) => n + [...graph.get(f)].filter((t) => !t.startsWith('type:')).length, 0)} kept at run time)`);
if (showGraph) for (const f of files) for (const t of graph.get(f)) console.log(`${name(f)} -> ${t.startsWith('type:') ? `${name(t.slice(5))} (type only)` : name(t)}`);
const kind = withTypes ? 'import cycles, type-only imports included' : 'import cycles at run time';
console.log(components.length === 0 ? `${kind}: none` : `${kind}: ${components.length}`);
for (const c of components) {
  // One cycle through the component, for the reader: follow edges inside it from its first file back to it.
  const inside = new Set(c.map((n) => join(SRC, n)));
  const start = join(SRC, c[0]);
  const path = [start];
  const seen = new Set([start]);
  const find = (v) => {
    for (const w of runEdges(v).filter((x) => inside.has(x))) {
      if (w === start) return true;
      if (seen.has(w)) continue;
      seen.add(w);
      path.push(w);
      if (find(w)) return true;
      path.pop();
    }
    return false;
  };
  find(start);
  console.log(`  ${c.length} files: ${c.join(', ')}`);
  console.log(`    e.g. ${[...path, start].map(name).join(' -> ')}`);
}
longFunctions.sort((a, b) => b.lines - a.lines);
console.log(`functions over ${LIMIT} lines: ${longFunctions.length}`);
for (const f of longFunctions) console.log(`  ${String(f.lines).padStart(4)}  ${f.label}  ${f.where}`);
