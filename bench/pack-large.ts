/**
 * Peak memory of the command line on a large field: writes a SIDE x SIDE
 * float32 .npy band by band (default 16384 x 16384, 1 GiB), then runs, each
 * in a child process of its own, `rankfield pack` at an abs, a rel, an rmse
 * and a psnr bound, `rankfield unpack` of the abs archive to .npy, and
 * `rankfield unpack` to .npy of a decompression bomb (a few-KB archive of a
 * constant SIDE x SIDE field, written here through the library); and reports
 * each child's peak resident set size, which covers its worker threads too
 * (they share the process); and `rankfield check --against` the input.
 * With --input netcdf the field is written as a NetCDF classic file
 * instead (one float variable 'field' of dimensions y, x), which the packs
 * and the check read. Target (issues 11 and 15): every figure below 300 MB.
 *
 * The field is invented for this measurement (bench/large-field.ts).
 *
 *   npx tsc -p . && npx tsc -p tsconfig.bench.json && \
 *     nice node bench/dist/bench/pack-large.js [--size MIB] [--input npy|netcdf] [--modes abs,rel,rmse,psnr] [--tile 64] [--threads N] [--dir DIR] [--keep] [--no-unpack] [--no-check]
 *
 * --size is the field's size in MiB (a power of 4: 64, 256, 1024; default
 * 1024). Every run writes its rows into bench/MEMORY-<SIZE>MiB.md (or
 * --report FILE), keeping earlier runs' rows for what it did not measure,
 * and the merged table into the README's block for its size
 * (<!-- memory <SIZE> MiB:begin ... -->), when README has one.
 * --no-unpack leaves out the unpacks, --no-check the check. The peak is read by /usr/bin/time -v where it exists
 * (its "Maximum resident set size"), else from the child's own
 * process.resourceUsage().maxRSS. Not a test: at 1 GiB it takes most of an
 * hour on two busy cores.
 */
import { spawn } from 'node:child_process';
import { closeSync, existsSync, mkdtempSync, openSync, readFileSync, rmSync, statSync, writeFileSync, writeSync } from 'node:fs';
import { loadavg, tmpdir } from 'node:os';
import { basename, dirname, join, resolve } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { ArchiveBuilder } from '../src/index.js';
import { valueBytes } from '../src/io/bands.js';
import { netcdfHeader } from '../src/io/netcdf-write.js';
import { FileSink } from '../src/io/file-sink.js';
import { BAND_ROWS, band, writeField } from './large-field.js';
import { xorshift32 } from './rng.js';

/** Repository root: this file runs from bench/dist/bench/. */
const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), '..', '..', '..');
const TIME = '/usr/bin/time';
/** The target of issues 11 and 15, in bytes. */
const TARGET = 300e6;

/** The bound each mode is measured at (the field spans about -2 .. 3). */
const BOUNDS: Record<string, string> = { abs: 'abs:0.01', rel: 'rel:1e-3', rmse: 'rmse:0.005', psnr: 'psnr:60' };

function arg(name: string, fallback: string): string {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
}

/** Write the field as a NetCDF classic file (float variable 'field' of dimensions y, x), band by band: the header, then rows, big-endian. */
function writeNetcdfField(path: string, side: number): void {
  const { header, layout } = netcdfHeader({ dims: [{ name: 'y', size: side }, { name: 'x', size: side }], globalAttrs: { title: 'bench/pack-large.ts field' }, variables: [{ name: 'field', dims: ['y', 'x'], type: 'float', attrs: { units: '1' } }] });
  const fd = openSync(path, 'w');
  try {
    writeSync(fd, header);
    const next = xorshift32(20261202);
    for (let r0 = 0; r0 < side; r0 += BAND_ROWS) {
      const rows = band(side, r0, Math.min(BAND_ROWS, side - r0), next);
      writeSync(fd, valueBytes(rows, 'big'));
    }
  } finally {
    closeSync(fd);
  }
  if (statSync(path).size !== layout.totalBytes) throw new Error(`${path}: wrote ${statSync(path).size} bytes, the header declares ${layout.totalBytes}`);
}

/** A valid archive of a constant side x side field, written through the library: a few KB that decode to side^2 values. */
function writeBomb(path: string, side: number, tile: number): void {
  const sink = FileSink.create(path);
  const b = new ArchiveBuilder(sink);
  b.addBands((_r0, count) => new Float32Array(count * side).fill(1.5), [side, side], 'f32', { bound: 'abs:0.01', tile, name: 'bomb' });
  b.finish();
  sink.close();
}

interface ChildRun {
  code: number | null;
  stdout: string;
  stderr: string;
  /** Peak resident set size in bytes. */
  maxRss: number;
  /** Where the peak was read: 'time -v' or 'resourceUsage'. */
  by: string;
  seconds: number;
}

/** Run the CLI in a fresh Node process (under /usr/bin/time -v where it exists); resolve with its exit code, output and peak RSS. `dir` holds the child's script. */
function cli(args: string[], dir: string): Promise<ChildRun> {
  const main = pathToFileURL(join(ROOT, 'dist', 'cli', 'main.js')).href;
  // resourceUsage().maxRSS is in kilobytes (getrusage ru_maxrss on Linux), for the whole process: worker threads included.
  const script = `
    const { main } = await import(${JSON.stringify(main)});
    const code = await main(${JSON.stringify(args)});
    process.stderr.write('@@maxrss ' + process.resourceUsage().maxRSS * 1024 + '\\n');
    process.exitCode = code;`;
  // A script file rather than --eval: worker threads inherit the process's Node options, and --input-type would stop them.
  const file = join(dir, `child-${process.pid}.mjs`);
  writeFileSync(file, script);
  const node = [process.execPath, file];
  const timed = existsSync(TIME);
  const [cmd, ...rest] = timed ? [TIME, '-v', ...node] : node;
  const start = performance.now();
  return new Promise((done, fail) => {
    const child = spawn(cmd, rest, { cwd: ROOT });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d: Buffer) => (stdout += d.toString()));
    child.stderr.on('data', (d: Buffer) => (stderr += d.toString()));
    child.on('error', fail);
    child.on('close', (code) => {
      const own = /@@maxrss (\d+)/.exec(stderr);
      const tv = /Maximum resident set size \(kbytes\): (\d+)/.exec(stderr);
      const maxRss = tv ? Number(tv[1]) * 1024 : own ? Number(own[1]) : NaN;
      const text = stderr.replace(/@@maxrss \d+\n/, '');
      // What /usr/bin/time adds begins with its "Command being timed" line.
      const cut = text.indexOf('\tCommand being timed');
      done({ code, stdout, stderr: cut >= 0 ? text.slice(0, cut) : text, maxRss, by: tv ? 'time -v' : 'resourceUsage', seconds: (performance.now() - start) / 1000 });
    });
  });
}

interface Row {
  /** When the run ended (UTC, to the minute). */
  date: string;
  run: string;
  command: string;
  bytesIn: number;
  bytesOut: number;
  seconds: number;
  maxRss: number;
  note: string;
}

const mb = (b: number) => (b / 1e6).toFixed(1);
const HEAD = '| run | command | ended (UTC) | input bytes | output bytes | time (s) | peak RSS (MB) | below 300 MB |';
const rowLine = (r: Row) =>
  `| ${r.run} | \`${r.command}\` | ${r.date} | ${r.bytesIn} | ${r.bytesOut} | ${r.seconds.toFixed(1)} | ${mb(r.maxRss)} | ${r.maxRss < TARGET ? 'yes' : '**no**'}${r.note ? ` (${r.note})` : ''} |`;
const now = () => new Date().toISOString().slice(0, 16).replace('T', ' ');

/** The rows of an earlier table of the same size (kept where this run did not measure the same thing), as lines. */
function earlierRows(file: string, runs: Set<string>): string[] {
  if (!existsSync(file)) return [];
  return (
    readFileSync(file, 'utf8')
      .split('\n')
      .filter((l) => /^\| (pack|unpack|check) /.test(l) && !runs.has(l.slice(2, l.indexOf(' | '))))
      // Rows of the first version of the table had no date column.
      .map((l) => (l.split(' | ').length === 7 ? l.replace(/^(\| [^|]+ \| `[^`]+`) \| /, '$1 | (not recorded) | ') : l))
      .filter((l) => l.split(' | ').length === 8)
  );
}

function table(rows: Row[]): string {
  const lines = [HEAD, '|---|---|---|--:|--:|--:|--:|---|'];
  for (const r of rows) lines.push(rowLine(r));
  return lines.join('\n');
}

async function run(): Promise<void> {
  const size = Number(arg('size', '1024'));
  const side = Math.round(Math.sqrt((size * 2 ** 20) / 4));
  if (!(side >= 64 && side * side * 4 === size * 2 ** 20)) throw new Error(`--size must be a power of 4 MiB (64, 256, 1024), got ${arg('size', '')}`);
  const modes = arg('modes', 'abs,rel,rmse,psnr').split(',');
  for (const m of modes) if (!(m in BOUNDS)) throw new Error(`unknown mode '${m}' (abs, rel, rmse, psnr)`);
  const tile = arg('tile', '64');
  const threads = arg('threads', '');
  const keep = process.argv.includes('--keep');
  const own = arg('dir', '') === '';
  const dir = own ? mkdtempSync(join(tmpdir(), 'rankfield-pack-large-')) : resolve(arg('dir', ''));
  const netcdf = arg('input', 'npy') === 'netcdf';
  if (!['npy', 'netcdf'].includes(arg('input', 'npy'))) throw new Error(`--input must be npy or netcdf, got ${arg('input', '')}`);
  const input = join(dir, `field-${side}.${netcdf ? 'nc' : 'npy'}`);
  const from = netcdf ? ' from NetCDF' : '';
  const rows: Row[] = [];
  const extra = threads ? ['--threads', threads] : [];
  const started = new Date();
  try {
    const t0 = performance.now();
    if (!existsSync(input)) (netcdf ? writeNetcdfField : writeField)(input, side);
    const inBytes = statSync(input).size;
    console.log(`field ${input}: ${side} x ${side} float32${netcdf ? ' (NetCDF classic)' : ''}, ${inBytes} bytes (${((performance.now() - t0) / 1000).toFixed(1)} s)`);
    const archives = new Map<string, string>();
    for (const mode of modes) {
      const out = join(dir, `field-${side}-${mode}.rfz`);
      const args = ['pack', input, '-o', out, '--bound', BOUNDS[mode], '--tile', tile, '--force', '--quiet', ...extra];
      const r = await cli(args, dir);
      if (r.code !== 0) throw new Error(`pack ${BOUNDS[mode]} failed (exit ${r.code}): ${r.stderr.trim()}`);
      archives.set(mode, out);
      rows.push({ date: now(), run: `pack ${BOUNDS[mode]}${from}`, command: `rankfield ${args.slice(0, -2).join(' ').replaceAll(dir + '/', '')}`, bytesIn: inBytes, bytesOut: statSync(out).size, seconds: r.seconds, maxRss: r.maxRss, note: '' });
      console.log(table(rows.slice(-1)).split('\n')[2]);
    }
    let by = '';
    if (!process.argv.includes('--no-check') && archives.size > 0) {
      const first = archives.get(modes[0])!;
      const ca = ['check', first, '--against', input, ...extra];
      const c = await cli(ca, dir);
      if (c.code !== 0) throw new Error(`check --against failed (exit ${c.code}): ${c.stderr.trim()} ${c.stdout.trim()}`);
      const measured = /measured +(max error [^;\n]*)/.exec(c.stdout);
      rows.push({ date: now(), run: `check --against${netcdf ? ' NetCDF' : ' .npy'}`, command: `rankfield ${ca.join(' ').replaceAll(dir + '/', '')}`, bytesIn: statSync(first).size + inBytes, bytesOut: 0, seconds: c.seconds, maxRss: c.maxRss, note: measured ? `measured ${measured[1]}` : '' });
      console.log(table(rows.slice(-1)).split('\n')[2]);
      by = c.by;
    }
    if (!process.argv.includes('--no-unpack')) {
      const first = archives.get(modes[0])!;
      const back = join(dir, `field-${side}-back.npy`);
      const ua = ['unpack', first, '-o', back, '--force', '--quiet', ...extra];
      const u = await cli(ua, dir);
      if (u.code !== 0) throw new Error(`unpack failed (exit ${u.code}): ${u.stderr.trim()}`);
      rows.push({ date: now(), run: 'unpack to .npy', command: `rankfield ${ua.join(' ').replaceAll(dir + '/', '')}`, bytesIn: statSync(first).size, bytesOut: statSync(back).size, seconds: u.seconds, maxRss: u.maxRss, note: '' });
      console.log(table(rows.slice(-1)).split('\n')[2]);
      rmSync(back, { force: true });
      const bomb = join(dir, `bomb-${side}.rfz`);
      rmSync(bomb, { force: true });
      // Tiles of 1024 x 1024, the largest readers accept by default: the fewest bytes for the most values.
      writeBomb(bomb, side, 1024);
      const bombBack = join(dir, `bomb-${side}.npy`);
      const ba = ['unpack', bomb, '-o', bombBack, '--force', ...extra];
      const b = await cli(ba, dir);
      if (b.code !== 0) throw new Error(`unpack of the bomb failed (exit ${b.code}): ${b.stderr.trim()}`);
      const said = /note: (writing [^\n]*)/.exec(b.stderr);
      rows.push({ date: now(), run: 'unpack of a constant field', command: `rankfield ${ba.join(' ').replaceAll(dir + '/', '')}`, bytesIn: statSync(bomb).size, bytesOut: statSync(bombBack).size, seconds: b.seconds, maxRss: b.maxRss, note: said ? `said before writing: "${said[1]}"` : 'no size note' });
      console.log(table(rows.slice(-1)).split('\n')[2]);
      rmSync(bombBack, { force: true });
      by = u.by;
    }
    // Every run writes its rows into bench/MEMORY-<size>MiB.md (or --report FILE), keeping the rows of earlier runs of the same size for what it did not measure, and the merged table into the README's block for its size, when README has one: README figures always come from runs.
    const report = arg('report', join(ROOT, 'bench', `MEMORY-${size}MiB.md`));
    const order = ['pack abs', 'pack rel', 'pack rmse', 'pack psnr', 'check --against .npy', 'unpack to', 'unpack of', 'NetCDF:pack abs', 'NetCDF:pack rel', 'NetCDF:pack rmse', 'NetCDF:pack psnr', 'check --against NetCDF'];
    const rank = (l: string) => order.findIndex((o) => (o.startsWith('NetCDF:') ? l.startsWith(`| ${o.slice(7)}`) && l.includes(' from NetCDF |') : l.startsWith(`| ${o}`) && !l.includes(' from NetCDF |')));
    const merged = [...earlierRows(report, new Set(rows.map((r) => r.run))), ...rows.map(rowLine)].sort((x, y) => rank(x) - rank(y));
    const md = [
      `# Peak memory of pack, check and unpack on a large field`,
      '',
      `Rows from runs of \`node bench/dist/bench/pack-large.js\` (each row gives its command and when it ended); last written by \`node bench/dist/bench/pack-large.js${process.argv.slice(2).length ? ' ' + process.argv.slice(2).join(' ') : ''}\`, started ${started.toISOString().replace('T', ' ').replace(/\.\d+Z$/, ' UTC')}, Node ${process.version}, load average at its end ${loadavg().map((x) => x.toFixed(2)).join(' ')} (2 cores shared with other work: times are not comparable between rows).`,
      '',
      `Field: ${side} x ${side} float32 (${((side * side * 4) / 2 ** 30).toFixed(3)} GiB of values), invented for the measurement (bench/pack-large.ts: smooth waves, bumps and a front, plus seeded noise of amplitude 1e-3). Tiles ${tile} x ${tile}; threads ${threads || 'default (the core count)'}. "from NetCDF": the same field written as a NetCDF classic file (a header and one float variable 'field' of dimensions y, x, big-endian; bench/pack-large.ts --input netcdf). Each run is a child process; peak RSS is its maximum resident set size (${by === 'resourceUsage' ? 'process.resourceUsage().maxRSS' : '`/usr/bin/time -v`'}), worker threads included. "unpack of a constant field" unpacks a valid archive of a constant ${side} x ${side} field in 1024 x 1024 tiles, a few KB that decode to ${side * side * 4} bytes of values. MB = 10^6 bytes.`,
      '',
      HEAD,
      '|---|---|---|--:|--:|--:|--:|---|',
      ...merged,
      '',
    ].join('\n');
    console.log('\n' + md);
    writeFileSync(report, md);
    console.log(`wrote ${report}`);
    const readme = join(ROOT, 'README.md');
    const text = readFileSync(readme, 'utf8');
    const begin = `<!-- memory ${size} MiB:begin (written by bench/pack-large.ts) -->`;
    const end = `<!-- memory ${size} MiB:end -->`;
    const a = text.indexOf(begin);
    const e = text.indexOf(end);
    if (a >= 0 && e > a) {
      const cells = merged.map((l) => l.split(' | '));
      const worst = cells.reduce((x, c) => Math.max(x, Number(c[6])), 0);
      const line = cells.map((c) => `${c[0].slice(2)} ${c[6]} MB`).join(', ');
      const block = `${side} x ${side} float32 (${size} MiB), tiles ${tile} x ${tile}, peak resident memory of the whole process, worker threads included ([bench/${basename(report)}](bench/${basename(report)}), written by \`bench/pack-large.ts --size ${size}\`): ${line}; the largest ${worst.toFixed(1)} MB.`;
      writeFileSync(readme, text.slice(0, a + begin.length) + '\n' + block + '\n' + text.slice(e));
      console.log(`updated the ${size} MiB memory block of ${readme}`);
    }
  } finally {
    if (own && !keep) rmSync(dir, { recursive: true, force: true });
    else console.log(`files kept in ${dir}`);
  }
}

await run();
