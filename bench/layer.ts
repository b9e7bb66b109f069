/**
 * The field layer against none (pack option `layer`), on its own: archive
 * sizes of the bench fields that are of low rank as a whole (basin-stack,
 * smooth-*) and a real one (annual-precip) with fixed 64 x 64 tiles, without
 * and with `layer: 'auto'`, beside the default (tile shape by trial, no
 * layer), at rel:1e-3, psnr:40 and psnr:60; then the pack time of 'auto'
 * against 'off' at the default tile shape (medians of --runs runs, same
 * process). Each archive's bound is checked on the errors the encoder
 * measured with the decoder's own code (the index's summary). Writes the
 * tables into RESULTS.md (--results, default bench/RESULTS.md) between the
 * layer markers, which `npm run bench` carries over when it rewrites the file.
 *
 *   npx tsc -p tsconfig.bench.json && node bench/dist/bench/layer.js [--fields a,b] [--runs N] [--timing a,b] [--results FILE] [--quick]
 */
import { existsSync, readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { open, pack, type PackOptions } from '../src/index.js';
import { benchFields, type BenchField } from './fields.js';
import { LAYER_BEGIN, LAYER_END, withBlock } from './layer-block.js';
import { timeTask } from './timing.js';

const arg = (name: string, fallback: string) => {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 && i + 1 < process.argv.length ? process.argv[i + 1] : fallback;
};
const QUICK = process.argv.includes('--quick');
const FIELDS = arg('fields', 'basin-stack,smooth-bumps,smooth-ripple,smooth-front,annual-precip').split(',');
const TIMING = arg('timing', 'basin-stack,smooth-bumps,annual-precip,large').split(',');
const RUNS = Number(arg('runs', '3'));
const RESULTS = arg('results', join(process.cwd(), 'bench', 'RESULTS.md'));
const BOUNDS = ['rel:1e-3', 'psnr:40', 'psnr:60'];


/** One packing: its size, the layer's rank (0: none), and the bound checked on the recorded errors. */
async function packed(f: BenchField, bound: string, o: Partial<PackOptions>): Promise<{ bytes: number; rank: number }> {
  const bytes = pack(f.values, [f.rows, f.cols], { bound, fill: f.fill, ...o });
  const a = await open(bytes);
  try {
    const main = a.header.fields.find((h) => h.factorOf === undefined)!;
    const { summary } = a.field(main.name);
    const tol = main.bound.tolerance;
    // The index records errors rounded up to binary32 (spec/FORMAT.md 7.5): within one binary32 ulp of the tolerance.
    const limit = tol * (1 + 2 ** -23);
    const within = bound.startsWith('psnr') ? summary.rmse <= limit : summary.max_err <= limit;
    if (!within) throw new Error(`${f.id} ${bound} ${JSON.stringify(o)}: recorded max error ${summary.max_err}, RMSE ${summary.rmse}, tolerance ${tol}`);
    return { bytes: bytes.length, rank: main.layer?.rank ?? 0 };
  } finally {
    await a.close();
  }
}

async function main(): Promise<void> {
  const all = benchFields(QUICK);
  const byId = (id: string) => {
    const f = all.find((x) => x.id === id);
    if (!f) throw new Error(`no bench field '${id}' (fields: ${all.map((x) => x.id).join(', ')})`);
    return f;
  };
  const lines: string[] = [];
  const command = `node bench/dist/bench/layer.js ${process.argv.slice(2).join(' ')}`.trim();
  lines.push('## Field layer', '', `From \`${command}\` on ${new Date().toISOString().replace('T', ' ').replace(/\.\d+Z$/, ' UTC')}${QUICK ? ' (quick fields)' : ''}.`, '');
  lines.push('Archive bytes with fixed 64 x 64 tiles without a layer (`tile: 64`) and with one chosen by bytes (`tile: 64, layer: \'auto\'`, its rank in brackets; none: no rank paid on the sample), and with the defaults (tile shape by trial, no layer); gain: 64 x 64 without over with the layer.', '');
  lines.push('| field | bound | tile 64 | tile 64, layer auto | gain | default |', '|---|---|---:|---:|---:|---:|');
  for (const id of FIELDS) {
    const f = byId(id);
    for (const bound of BOUNDS) {
      const off = await packed(f, bound, { tile: 64 });
      const auto = await packed(f, bound, { tile: 64, layer: 'auto' });
      const def = await packed(f, bound, {});
      lines.push(`| ${id} (${f.rows}x${f.cols}) | ${bound} | ${off.bytes} | ${auto.bytes} (${auto.rank === 0 ? 'none' : `rank ${auto.rank}`}) | ${(off.bytes / auto.bytes).toFixed(2)}x | ${def.bytes} |`);
      console.error(`${id} ${bound}: ${off.bytes} -> ${auto.bytes} (rank ${auto.rank}); default ${def.bytes}`);
    }
  }
  lines.push('', `Pack time at the default tile shape, rel:1e-3 and psnr:60, \`layer: 'off'\` against \`'auto'\` (median ms of ${RUNS} runs each, one thread, same process):`, '');
  lines.push('| field | bound | off (ms) | auto (ms) | auto / off | bytes off | bytes auto |', '|---|---|---:|---:|---:|---:|---:|');
  for (const id of TIMING) {
    const f = byId(id);
    for (const bound of ['rel:1e-3', 'psnr:60']) {
      const o = { iterations: RUNS, timeMs: 0, slowMs: Infinity, minRuns: RUNS };
      const off = await timeTask(() => pack(f.values, [f.rows, f.cols], { bound, fill: f.fill, layer: 'off' }), o);
      const auto = await timeTask(() => pack(f.values, [f.rows, f.cols], { bound, fill: f.fill, layer: 'auto' }), o);
      const [a, b] = [await packed(f, bound, { layer: 'off' }), await packed(f, bound, { layer: 'auto' })];
      lines.push(`| ${id} (${f.rows}x${f.cols}) | ${bound} | ${off.medianMs.toFixed(0)} | ${auto.medianMs.toFixed(0)} | ${(auto.medianMs / off.medianMs).toFixed(2)} | ${a.bytes} | ${b.bytes}${b.rank ? ` (rank ${b.rank})` : ''} |`);
      console.error(`${id} ${bound}: ${off.medianMs.toFixed(0)} ms -> ${auto.medianMs.toFixed(0)} ms`);
    }
  }
  const block = `${LAYER_BEGIN}\n${lines.join('\n')}\n${LAYER_END}`;
  const text = existsSync(RESULTS) ? readFileSync(RESULTS, 'utf8') : '';
  writeFileSync(RESULTS, withBlock(text, block));
  console.log(lines.join('\n'));
  console.error(`wrote the field layer block of ${RESULTS}`);
}

main().catch((e: unknown) => {
  console.error(e);
  process.exit(1);
});
