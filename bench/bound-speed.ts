/**
 * The speed issue's target "psnr and rmse bounds no slower than pointwise
 * ones", measured on its own: one-thread packs of each bench field at
 * rel:1e-3 and at each psnr bound of the bench, timed in alternating rounds
 * (see timedRounds in timing.ts), so that the ratios compare packs made over
 * the same minutes. The main table's encode MB/s time each cell on its own,
 * minutes apart, and this host's speed drifts from minute to minute.
 */
import { pack } from '../src/index.js';
import type { BenchField } from './fields.js';
import { timedRounds } from './timing.js';

/** The pointwise bound the L2 bounds are set against. */
export const POINTWISE_BOUND = 'rel:1e-3';
/** The L2 bounds timed: the bench's psnr bounds. */
export const L2_BOUNDS = ['psnr:40', 'psnr:60', 'psnr:80'] as const;

/** Warm-up of each bound's packs on a field whose pack takes at most {@link QUICK_PACK_MS} (see timedRounds); none on slower ones. */
const WARM_MS = 500;
const QUICK_PACK_MS = 250;

/** One field's median pack times (ms, one thread), by bound. */
export interface BoundSpeedRow {
  id: string;
  rounds: number;
  /** Median ms a pack at {@link POINTWISE_BOUND}. */
  pointwise: number;
  /** Median ms a pack at each of {@link L2_BOUNDS}, in order. */
  l2: number[];
}

/** Median pack times of each field at the pointwise and the L2 bounds, alternated in rounds; `rounds` on quick fields, 3 on slow ones. */
export async function boundSpeeds(fields: readonly BenchField[], rounds: number, progress: (id: string) => void): Promise<BoundSpeedRow[]> {
  const out: BoundSpeedRow[] = [];
  for (const f of fields) {
    const packAt = (bound: string) => () => pack(f.values, [f.rows, f.cols], { bound, fill: f.fill });
    const fns = [POINTWISE_BOUND, ...L2_BOUNDS].map(packAt);
    // Two untimed packs at each bound first: the check that it works, and (the second, warmer) the probe of its cost.
    let slowest = 0;
    for (const fn of fns) {
      fn();
      const t0 = performance.now();
      fn();
      slowest = Math.max(slowest, performance.now() - t0);
    }
    const quick = slowest <= QUICK_PACK_MS;
    const n = quick ? rounds : 3;
    const [pointwise, ...l2] = await timedRounds(fns, n, quick ? WARM_MS : 0);
    out.push({ id: f.id, rounds: n, pointwise, l2 });
    progress(`${f.id} bounds`);
  }
  return out;
}

/** The table of {@link boundSpeeds}, as Markdown lines. */
export function boundSpeedTable(rows: readonly BoundSpeedRow[]): string[] {
  const out = [
    `One-thread packs of each field at ${POINTWISE_BOUND} and at ${L2_BOUNDS.join(', ')}, timed in alternating rounds in one process (bench/bound-speed.ts; medians; on fields whose packs take at most ${QUICK_PACK_MS} ms, after a warm-up and in batches, as above): ms a pack, and pointwise time / L2 time (at least 1.00x: the L2 bound is no slower).`,
    '',
    `| field | rounds | ${POINTWISE_BOUND} ms | ${L2_BOUNDS.map((b) => `${b} ms`).join(' | ')} | ${L2_BOUNDS.map((b) => `${b} speed / ${POINTWISE_BOUND}`).join(' | ')} |`,
    `|---|--:|--:|${L2_BOUNDS.map(() => '--:|').join('')}${L2_BOUNDS.map(() => '--:|').join('')}`,
  ];
  for (const r of rows) out.push(`| ${r.id} | ${r.rounds} | ${ms(r.pointwise)} | ${r.l2.map(ms).join(' | ')} | ${r.l2.map((t) => `${(r.pointwise / t).toFixed(2)}x`).join(' | ')} |`);
  return out;
}

const ms = (t: number) => (t >= 100 ? t.toFixed(0) : t.toFixed(1));
