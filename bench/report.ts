/** RESULTS.md: tables per field, summary lines, targets, and how the run was made. */
import type { Errors } from './metrics.js';
import { type SpeedRun, speedTable } from './speed.js';
import { L2_BOUNDS, POINTWISE_BOUND } from './bound-speed.js';
import type { Breakdown, Tiling } from './rankfield.js';

export type Status = 'ok' | 'failed' | 'skipped' | 'floor';

/** One (field, bound, method) cell. */
export interface Row {
  field: string;
  bound: string;
  method: string;
  status: Status;
  reason?: string;
  bytes?: number;
  ratio?: number;
  bpv?: number;
  errors?: Errors;
  /** Achieved max error / E (E: pointwise limit or RMSE limit). */
  maxOverE?: number;
  encMBs?: number;
  decMBs?: number;
  encRuns?: number;
  decRuns?: number;
  breakdown?: Breakdown;
  /** For the metadata target (rankfield at rel:1e-3): where its share passes 2%, the chosen tiling and coarser ones (bench/rankfield.ts). */
  coarser?: Tiling[];
  /** Eckart-Young floor, in factor values. */
  floorValues?: number;
}

export interface FieldInfo {
  id: string;
  rows: number;
  cols: number;
  source: string;
  smooth: boolean;
  large: boolean;
  range: [number, number];
  missing: number;
}

export interface RunInfo {
  command: string;
  date: string;
  quick: boolean;
  machine: string[];
  elapsedS: number;
  methods: { id: string; describe: string }[];
  fields: FieldInfo[];
  bounds: string[];
  rows: Row[];
  notes: string[];
  /** The speed issue's thread and whole-process measurements (bench/speed.ts); absent when the run skipped them. */
  speed?: SpeedRun;
}

const mark = (ok: boolean): string => (ok ? '**met**' : '**not met**');

const fmt = {
  ratio: (v: number): string => (v >= 100 ? v.toFixed(0) : v >= 10 ? v.toFixed(1) : v.toFixed(2)),
  mbs: (v: number): string => (v >= 100 ? v.toFixed(0) : v >= 10 ? v.toFixed(1) : v.toFixed(2)),
  sci: (v: number): string => (v === 0 ? '0' : v.toExponential(2)),
  db: (v: number): string => (Number.isFinite(v) ? v.toFixed(1) : 'exact'),
};

/** Rankfield's ratio over the best working baseline's (never the floor) in one (field, bound) cell. */
export interface Quotient {
  field: string;
  bound: string;
  rankfield: Row | undefined;
  best: Row | undefined;
  value: number | null;
}

export function quotients(info: RunInfo, ours = 'rankfield'): Quotient[] {
  const out: Quotient[] = [];
  for (const f of info.fields) {
    for (const b of info.bounds) {
      const cell = info.rows.filter((r) => r.field === f.id && r.bound === b);
      if (cell.length === 0) continue;
      const rf = cell.find((r) => r.method === ours);
      const base = cell.filter((r) => !r.method.startsWith('rankfield') && r.status === 'ok' && r.ratio !== undefined);
      const best = base.reduce<Row | undefined>((a, r) => (a === undefined || (r.ratio ?? 0) > (a.ratio ?? 0) ? r : a), undefined);
      const value = rf?.status === 'ok' && best?.ratio && rf.ratio ? rf.ratio / best.ratio : null;
      out.push({ field: f.id, bound: b, rankfield: rf, best, value });
    }
  }
  return out;
}

function notes(r: Row): string {
  if (r.status === 'skipped' || r.status === 'failed') return r.reason ?? '';
  if (r.status === 'floor') return `floor: ${r.floorValues} factor values at 32 bits each; no decode`;
  const b = r.breakdown;
  if (!b) return r.reason ?? '';
  const pct = (v: number): string => `${((100 * v) / b.total).toFixed(0)}%`;
  return `mean rank ${b.meanRank.toFixed(2)} (${b.factorValues} factor values); factors ${pct(b.factors)}, residual ${pct(b.residual)}, metadata ${pct(b.metadata)} (per tile ${pct(b.tileMetadata)}, frame ${b.container} B)${b.exactTiles ? `; ${b.exactTiles}/${b.tiles} tiles exact` : ''}`;
}

function table(rows: Row[]): string[] {
  const out = [
    '| bound | method | status | bytes | ratio | bits/value | max err / E | RMSE | PSNR dB | enc MB/s | dec MB/s | runs enc/dec | notes |',
    '|---|---|---|--:|--:|--:|--:|--:|--:|--:|--:|--:|---|',
  ];
  for (const r of rows) {
    const e = r.errors;
    const status = r.status === 'failed' ? '**FAILED**' : r.status;
    const cells = [
      r.bound,
      r.method === 'rankfield' ? '**rankfield**' : r.method,
      status,
      r.bytes !== undefined ? String(r.bytes) : '',
      r.ratio !== undefined ? fmt.ratio(r.ratio) : '',
      r.bpv !== undefined ? r.bpv.toFixed(3) : '',
      r.maxOverE !== undefined ? r.maxOverE.toFixed(3) : '',
      e ? fmt.sci(e.rmse) : '',
      e ? fmt.db(e.psnr) : '',
      r.encMBs !== undefined ? fmt.mbs(r.encMBs) : '',
      r.decMBs !== undefined ? fmt.mbs(r.decMBs) : '',
      r.encRuns !== undefined ? `${r.encRuns}/${r.decRuns ?? ''}` : '',
      notes(r).replace(/\|/g, '/'),
    ];
    out.push(`| ${cells.join(' | ')} |`);
  }
  return out;
}

function summaryLine(info: RunInfo, q: Quotient[], field: string, ours = 'rankfield'): string {
  const parts = q
    .filter((c) => c.field === field)
    .map((c) => {
      if (c.rankfield?.status !== 'ok') return `${c.bound} ${ours} ${c.rankfield ? 'FAILED' : 'missing'}`;
      if (c.value === null || !c.best) return `${c.bound} no working baseline`;
      return `${c.bound} ${c.value.toFixed(2)}x (vs ${c.best.method})`;
    });
  return `- **${field}**: ${ours} ratio / best baseline ratio: ${parts.join(' · ')}`;
}

function targets(info: RunInfo, q: Quotient[]): string[] {
  const out: string[] = [];
  const measured = q.filter((c) => c.value !== null);
  const below = measured.filter((c) => (c.value as number) < 1);
  const missing = q.filter((c) => c.value === null);
  out.push(
    `- rankfield's ratio >= the best baseline's at every field and bound: ${mark(below.length === 0 && missing.length === 0)}` +
      ` (${measured.length - below.length} of ${q.length} cells at or above 1.00x` +
      (below.length ? `; below: ${below.map((c) => `${c.field} ${c.bound} ${(c.value as number).toFixed(2)}x`).join(', ')}` : '') +
      (missing.length ? `; not comparable: ${missing.map((c) => `${c.field} ${c.bound}`).join(', ')}` : '') +
      ')',
  );
  // Real fields: the open datasets (vega-datasets); geometric mean of rankfield / best baseline over their cells.
  const real = info.fields.filter((f) => f.source.startsWith('vega-datasets')).map((f) => f.id);
  const realCells = q.filter((c) => real.includes(c.field) && c.value !== null);
  const geo = realCells.length ? Math.exp(realCells.reduce((s, c) => s + Math.log(c.value as number), 0) / realCells.length) : NaN;
  out.push(`- geometric mean over the real fields (${real.join(', ')}), ${realCells.length} cells, of rankfield / best baseline >= 1.5x: ${mark(geo >= 1.5)} (${geo.toFixed(2)}x)`);
  // Fields low-rank as a whole: rankfield against the global SVD at every psnr bound.
  const lowRank = info.fields.filter((f) => f.smooth || f.id === 'basin-stack').map((f) => f.id);
  const svdCells: string[] = [];
  let svdOk = true;
  for (const f of lowRank) {
    for (const b of info.bounds.filter((x) => x.startsWith('psnr'))) {
      const rf = info.rows.find((r) => r.field === f && r.bound === b && r.method === 'rankfield' && r.status === 'ok');
      const g = info.rows.find((r) => r.field === f && r.bound === b && r.method === 'global-svd' && r.status === 'ok');
      if (!rf?.ratio || !g?.ratio) continue;
      const v = rf.ratio / g.ratio;
      if (v < 1.5) svdOk = false;
      svdCells.push(`${f} ${b} ${v.toFixed(2)}x`);
    }
  }
  out.push(`- >= 1.5x global-svd on the fields low-rank as a whole (${lowRank.join(', ')}) at every psnr bound: ${mark(svdOk && svdCells.length > 0)} (${svdCells.join(', ') || 'no comparable cell'})`);
  // Metadata as the target counts it (tile headers, index, mask sections) at rel:1e-3; the archive's frame (prologue, header, directory, tail) is shown beside it.
  const meta = info.rows.filter((r) => r.method === 'rankfield' && r.bound === 'rel:1e-3' && r.breakdown);
  const metaOver = meta.filter((r) => r.breakdown!.tileMetadata > 0.02 * r.breakdown!.total);
  out.push(
    `- metadata (tile headers, index pages, mask sections) <= 2% of the archive on every field at rel:1e-3: ${mark(meta.length > 0 && metaOver.length === 0)} (` +
      meta.map((r) => `${r.field} ${((100 * r.breakdown!.tileMetadata) / r.breakdown!.total).toFixed(1)}% of ${r.breakdown!.total} bytes, frame ${r.breakdown!.container} B more`).join(', ') +
      ')',
  );
  for (const r of meta.filter((x) => x.coarser && x.coarser.length > 1)) {
    const [chosen, ...others] = r.coarser!;
    const tiling = (t: Tiling) => `${t.tile[0]}x${t.tile[1]} ${t.bytes} bytes (${(100 * t.share).toFixed(2)}%)`;
    out.push(
      `  - ${r.field}: the tile chosen by bytes, ${tiling(chosen)}, against coarser tiles (same bound, tile given): ${others.map(tiling).join(', ')}; ` +
        `each tile carries its index entry (a length, two CRC-32s, rank, missing count, two error shares) and its payload head, so fewer tiles mean less metadata but here a larger archive.`,
    );
  }
  const large = info.fields.find((f) => f.large);
  if (large) {
    const rf = info.rows.find((r) => r.field === large.id && r.bound === 'rel:1e-3' && r.method === 'rankfield');
    const df = info.rows.find((r) => r.field === large.id && r.bound === 'rel:1e-3' && r.method === 'deflate');
    const size = `${large.id}, ${large.rows}x${large.cols}, rel:1e-3, one core (Node runs the codec on one thread)`;
    if (rf?.encMBs !== undefined && rf.decMBs !== undefined) {
      const vsE = df?.encMBs ? ` = ${(rf.encMBs / df.encMBs).toFixed(2)}x fflate deflate of the raw bytes (${fmt.mbs(df.encMBs)} MB/s)` : '';
      const vsD = df?.decMBs ? ` = ${(rf.decMBs / df.decMBs).toFixed(2)}x fflate inflate (${fmt.mbs(df.decMBs)} MB/s)` : '';
      const decOk = df?.decMBs !== undefined && rf.decMBs >= df.decMBs;
      out.push(`- decode at least as fast as fflate inflate (${size}): ${mark(decOk)}: ${fmt.mbs(rf.decMBs)} MB/s${vsD}, median of ${rf.decRuns} runs`);
      out.push(`- encode (the speed issue's target, reported here): ${fmt.mbs(rf.encMBs)} MB/s${vsE}, median of ${rf.encRuns} runs`);
      if (df?.ratio !== undefined && rf.ratio !== undefined) out.push(`- reference ratio on the large field: fflate deflate ${fmt.ratio(df.ratio)}, rankfield at rel:1e-3 ${fmt.ratio(rf.ratio)}`);
    } else out.push(`- speed targets: rankfield did not produce a timed row on ${large.id} at rel:1e-3 (${rf?.reason ?? 'missing'})`);
  }
  return out;
}

/**
 * The speed issue's targets, from the thread measurements (encode and decode
 * per thread against fflate in the same run, 2 threads against 1, the whole
 * unpack process) and from the main table (encode MB/s of rankfield at each
 * psnr bound against rel:1e-3 on the same field).
 */
function speedTargets(info: RunInfo): string[] {
  const out: string[] = [];
  const s = info.speed;
  const x = (v: number) => `${v.toFixed(2)}x`;
  if (s) {
    const enc = s.rows.filter((r) => r.id !== 'volcano');
    out.push(`- encode at ${s.bound} >= 1.0x fflate deflate-6 per thread (${enc.map((r) => r.id).join(', ')}; volcano, 21 kB of values, is in the table below but not counted, its times being mostly fixed costs): ${mark(enc.length > 0 && enc.every((r) => r.enc1 >= r.deflate))} (${enc.map((r) => `${r.id} ${x(r.enc1 / r.deflate)}`).join(', ')})`);
    const whole = s.pack ? `; as whole \`pack\` processes of the ${s.pack.field} field's .npy, --threads 2 / --threads 1 ${x(s.pack.whole.ms1 / s.pack.whole.ms2)}` : '';
    out.push(`- encode with 2 threads >= 1.7x 1 thread (same fields; threads started per call, as one command): ${mark(enc.length > 0 && enc.every((r) => r.enc2 >= 1.7 * r.enc1))} (${enc.map((r) => `${r.id} ${x(r.enc2 / r.enc1)}, warm pool ${x(r.enc2w / r.enc1)}`).join('; ')}${whole}; two CPU-bound threads got ${x(s.ceiling)} here)`);
    out.push(`- decode >= 1.0x fflate inflate per thread in the library: ${mark(s.rows.length > 0 && s.rows.every((r) => r.dec1 >= r.inflate))} (${s.rows.map((r) => `${r.id} ${x(r.dec1 / r.inflate)}`).join(', ')})`);
    if (s.unpack) {
      const w = s.unpack.whole;
      out.push(`- decode >= 1.0x inflate as a whole \`unpack\` process writing .npy (${s.unpack.field}, start-up included): ${mark(Math.max(w.mbs1, w.mbs2) >= s.unpack.inflate)} (--threads 1 ${x(w.mbs1 / s.unpack.inflate)}, --threads 2 ${x(w.mbs2 / s.unpack.inflate)})`);
    }
  } else out.push('- thread and whole-process speeds: not measured in this run (the quick run and runs of chosen fields skip them; `node bench/dist/bench/threads.js` measures them alone)');
  if (s?.bounds?.length) {
    // psnr bounds against rel:1e-3 on each field, packs alternated in rounds (bench/bound-speed.ts).
    const cells = s.bounds.map((r) => {
      const worst = r.l2.reduce((k, t, j) => (t > r.l2[k] ? j : k), 0);
      return { text: `${r.id} ${x(r.pointwise / r.l2[worst])} (${L2_BOUNDS[worst]})`, ok: r.pointwise >= r.l2[worst] };
    });
    out.push(`- psnr bounds no slower than pointwise ones (${POINTWISE_BOUND} pack time / slowest psnr pack time, per field, alternated in one process: see the Speed section): ${mark(cells.every((c) => c.ok))} (${cells.map((c) => c.text).join(', ')})`);
    return out;
  }
  // psnr bounds against rel:1e-3 on each field, from the main table's encode MB/s.
  const cells: string[] = [];
  let ok = true;
  for (const f of info.fields) {
    const ref = info.rows.find((r) => r.field === f.id && r.bound === 'rel:1e-3' && r.method === 'rankfield')?.encMBs;
    if (!ref) continue;
    const l2 = info.rows.filter((r) => r.field === f.id && r.method === 'rankfield' && r.bound.startsWith('psnr') && r.encMBs);
    if (!l2.length) continue;
    const worst = l2.reduce((a, b) => ((a.encMBs as number) <= (b.encMBs as number) ? a : b));
    const v = (worst.encMBs as number) / ref;
    if (v < 1) ok = false;
    cells.push(`${f.id} ${x(v)} (${worst.bound})`);
  }
  out.push(`- psnr bounds no slower than pointwise ones (slowest psnr encode / rel:1e-3 encode, per field): ${mark(ok && cells.length > 0)} (${cells.join(', ') || 'no comparable cells'})`);
  return out;
}

export function renderResults(info: RunInfo): string {
  const q = quotients(info);
  const lines: string[] = [];
  lines.push('# rankfield benchmarks');
  lines.push('');
  lines.push(`Generated by \`${info.command}\` on ${info.date}${info.quick ? ' — **quick run** (smaller fields, fewer runs; see Notes)' : ''}; took ${info.elapsedS.toFixed(0)} s. Do not edit by hand.`);
  lines.push('');
  lines.push('Machine: ' + info.machine.join('; ') + '.');
  lines.push('');
  lines.push('## Summary');
  lines.push('');
  for (const f of info.fields) lines.push(summaryLine(info, q, f.id));
  lines.push('');
  const qa = quotients(info, 'rankfield-64');
  if (qa.some((c) => c.rankfield)) {
    lines.push('With fixed 64 x 64 tiles (`tile: 64`, the cheapest window reads):');
    lines.push('');
    for (const f of info.fields) if (qa.some((c) => c.field === f.id && c.rankfield)) lines.push(summaryLine(info, qa, f.id, 'rankfield-64'));
    lines.push('');
  }
  const ranked = q.filter((c) => c.value !== null).sort((a, b) => (a.value as number) - (b.value as number));
  lines.push(`Worst cells against the best baseline: ${ranked.slice(0, 3).map((c) => `${c.field} ${c.bound} ${(c.value as number).toFixed(2)}x (vs ${c.best?.method})`).join('; ') || 'none'}.`);
  lines.push('');
  lines.push('## Targets (from issue 9)');
  lines.push('');
  lines.push(...targets(info, q));
  lines.push('');
  lines.push('## Speed (issue 10)');
  lines.push('');
  lines.push(...speedTargets(info));
  if (info.speed) {
    lines.push('');
    lines.push(...speedTable(info.speed));
  }
  lines.push('');
  lines.push('## How to read the tables');
  lines.push('');
  lines.push('- ratio = float32 bytes of the field (rows x cols x 4) / compressed bytes; bits/value = 8 x compressed bytes / (rows x cols).');
  lines.push('- E is the resolved tolerance: the pointwise limit for rel bounds (value x range), the RMSE limit for psnr bounds (range / 10^(dB/20)); range = max - min of the valid values. "max err / E" is the achieved maximum error over E.');
  lines.push('- RMSE and PSNR (20 log10(range / RMSE)) are measured over valid cells of the decoded field; missing cells must come back bit for bit.');
  lines.push('- Every output is decoded and checked against the original in this run: a row whose bound is not met (or whose missing cells differ) is **FAILED**, with the reason.');
  lines.push('- MB/s = float32 bytes of the field / median wall time (tinybench, sequential runs, no warm-up phase: the first run is the check run), 10^6 bytes per MB. "runs" is how many runs the median is of; a cell whose first run is slow is timed by that run alone.');
  lines.push('- rankfield notes: mean rank over tiles and the factor values it stores (sum of rank x (rows + cols), to set against the floor\'s count); shares of its bytes: factors = the factor streams (range-coded, with their step codes), residual = the residual stream and exceptions and exact tiles, metadata = everything else (each tile\'s fixed part with its centre, mask sections, section headers, container header, index and tail); of it, "per tile" = index pages plus every payload byte that is not coded data (fixed part, mask section, group list, step codes, stream lengths, residual step and predictor), the part the metadata target counts, and "frame" = prologue, header block, directory and tail, once per archive.');
  lines.push('- The best baseline of a cell is the working (not failed, not skipped) baseline with the highest ratio; the Eckart-Young floor is not a codec and never counts as the best.');
  lines.push('');
  lines.push('## Methods');
  lines.push('');
  for (const m of info.methods) lines.push(`- **${m.id}**: ${m.describe}`);
  lines.push('');
  lines.push('## Fields');
  lines.push('');
  for (const f of info.fields) lines.push(`- **${f.id}** (${f.rows}x${f.cols}, range ${f.range[0].toPrecision(5)} .. ${f.range[1].toPrecision(5)}${f.missing ? `, ${f.missing} missing cells` : ''}): ${f.source}`);
  lines.push('');
  for (const f of info.fields) {
    lines.push(`## ${f.id}`);
    lines.push('');
    lines.push(`${f.rows}x${f.cols}; rate-distortion plot: [rd-${f.id}.png](rd-${f.id}.png)`);
    lines.push('');
    lines.push(...table(info.rows.filter((r) => r.field === f.id)));
    lines.push('');
  }
  if (info.notes.length) {
    lines.push('## Notes');
    lines.push('');
    for (const n of info.notes) lines.push(`- ${n}`);
    lines.push('');
  }
  return lines.join('\n');
}

/**
 * The README's performance block: per field and bound, rankfield's ratio
 * over the best baseline's, and the share of its bytes in low-rank factors
 * (the rest is the residual, exact tiles and metadata), from the same run as
 * RESULTS.md.
 */
export function renderReadmeBlock(info: RunInfo): string {
  const q = quotients(info);
  const lines: string[] = [];
  lines.push(`From \`${info.command}\` on ${info.date} (${info.quick ? 'quick run' : 'full run'}; every figure is in [bench/RESULTS.md](bench/RESULTS.md)).`);
  lines.push('');
  lines.push('rankfield (default options) against the best of the baselines in each cell, as a ratio of compression ratios (above 1.00x: rankfield is smaller), and in brackets the share of rankfield\'s bytes that are low-rank factors (the rest is the predicted, range-coded residual and metadata):');
  lines.push('');
  lines.push(`| field | ${info.bounds.join(' | ')} |`);
  lines.push(`|---|${info.bounds.map(() => '--:').join('|')}|`);
  for (const f of info.fields) {
    const cells = info.bounds.map((b) => {
      const c = q.find((x) => x.field === f.id && x.bound === b);
      const r = info.rows.find((x) => x.field === f.id && x.bound === b && x.method === 'rankfield');
      if (!c || c.value === null || !r?.breakdown) return '–';
      return `${c.value.toFixed(2)}x (${Math.round((100 * r.breakdown.factors) / r.breakdown.total)}%)`;
    });
    lines.push(`| ${f.id} | ${cells.join(' | ')} |`);
  }
  lines.push('');
  lines.push('Read it this way: where the bracket is near 0% the tile-local predictor and the range coder carry the load (real, noisy or integer-valued fields at pointwise bounds); where it is large the truncated SVD does (fields low-rank as a whole, such as smooth fields and stacks of slowly changing snapshots, above all at PSNR bounds). On a stack that is not low rank in time (turbulence-stack) the predictors carry the pointwise bounds, working across snapshots (in the time x space layout the row above a cell is the same point one snapshot earlier), while at PSNR bounds dropping the weakest of its few time modes (32 snapshots) is still the cheapest.');
  return lines.join('\n');
}
