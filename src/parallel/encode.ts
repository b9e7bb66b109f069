/**
 * Encoding a field's tiles on a {@link WorkerPool}. The field-level choices
 * (value range, tolerance, L2 plan) are made here first, exactly as the
 * synchronous encoder makes them; each worker is handed them once, then
 * tiles one by one. Results come back in any order and are emitted in tile
 * order, so the archive is byte-identical for every thread count.
 *
 * This thread reads the input bands and writes the payloads while the
 * workers encode; at most {@link BANDS_PER_THREAD} bands of tiles per thread
 * are in flight (read and not yet written), which bounds the memory.
 */
import { encodeTile, fieldChoices, FieldSummary, tileGrid, tilesOf, tileToEncode, type BandSource, type EncodedTile, type FieldChoices, type FieldResult, type FieldSpec, type TileOutcome } from '../codec/field.js';
import { l2Plan, type L2PlanData } from '../codec/plan-l2.js';
import type { PreparedTile } from '../codec/prepare.js';
import { ErrorTally } from '../codec/tally.js';
import type { FloatArray } from '../types.js';
import type { WorkerPool } from './pool.js';

/** Bands of tiles per thread that may be in flight at once. */
const BANDS_PER_THREAD = 2;

/** {@link FieldChoices} as plain data, for a worker. */
interface WireChoices extends Omit<FieldChoices, 'plan'> {
  plan: L2PlanData | null;
}

/** One tile to encode: its raw values, or the tile prepared in the planning pass. */
interface TileTask {
  key: number;
  index: number;
  m: number;
  n: number;
  tile?: FloatArray;
  prepared?: PreparedTile;
}

/** Field choices by key, in each worker. */
const fields = new Map<number, FieldChoices>();
let nextKey = 1;

/** The tasks a worker runs for encoding (see worker.ts). */
export const encodeTasks = {
  'encode-setup'(body: { key: number; choices: WireChoices }) {
    const w = body.choices;
    fields.set(body.key, { ...w, plan: w.plan === null ? null : l2Plan(w.plan, w.fill) });
    return { result: null };
  },
  'encode-tile'(body: TileTask) {
    const c = fields.get(body.key);
    // Internal assertion: the set-up message always precedes a field's tiles in the port.
    if (c === undefined) throw new Error(`tile ${body.index} of an unknown field (key ${body.key})`);
    const t = body.prepared ?? tileToEncode(c, body.index, body.tile!, body.m, body.n);
    const o = encodeTile(c, t, body.index);
    const own = o.payload.byteOffset === 0 && o.payload.byteLength === o.payload.buffer.byteLength;
    const payload = own ? o.payload : o.payload.slice();
    return { result: { ...o, payload }, transfer: [payload.buffer as ArrayBuffer] };
  },
  'encode-forget'(body: { key: number }) {
    fields.delete(body.key);
    return { result: null };
  },
};

/**
 * Encode every tile of a field on `pool`, handing each to `emit` in tile
 * order; the same result, and the same payloads, as encodeField.
 */
export async function encodeFieldParallel(src: BandSource, spec: FieldSpec, emit: (index: number, tile: EncodedTile) => void, pool: WorkerPool): Promise<FieldResult> {
  const c = fieldChoices(src, spec);
  const key = nextKey++;
  const { plan, ...rest } = c;
  await pool.broadcast('encode-setup', { key, choices: { ...rest, plan: plan?.data ?? null } satisfies WireChoices });
  const summary = new FieldSummary(c);
  const limit = BANDS_PER_THREAD * pool.threads * tileGrid(spec)[1];
  const done = new Map<number, TileOutcome>();
  let next = 0;
  let submitted = 0;
  let answered = 0;
  let failure: { error: unknown } | null = null;
  let wake: (() => void) | null = null;
  const settle = () => {
    answered++;
    const w = wake;
    wake = null;
    w?.();
  };
  const waitFor = async (ready: () => boolean) => {
    while (failure === null && !ready()) await new Promise<void>((r) => (wake = r));
  };
  const finished = (o: TileOutcome & { index: number }) => {
    if (failure !== null) return;
    // The tally crossed threads as plain fields; give it its class back.
    done.set(o.index, { ...o, tally: Object.assign(new ErrorTally(), o.tally) });
    try {
      for (let d = done.get(next); d !== undefined; d = done.get(next)) {
        done.delete(next);
        summary.add(d);
        emit(next, { payload: d.payload, stats: d.stats });
        next++;
      }
    } catch (e) {
      failure = { error: e };
    }
  };
  try {
    for (const { index, tile, m, n } of tilesOf(src, spec)) {
      await waitFor(() => submitted - next < limit);
      if (failure !== null) break;
      const prepared = c.plan?.kept(index);
      const task: TileTask = prepared ? { key, index, m, n, prepared } : { key, index, m, n, tile };
      submitted++;
      pool.run<TileOutcome>('encode-tile', task, prepared ? [] : [tile.buffer as ArrayBuffer]).then(
        (o) => {
          finished({ ...o, index });
          settle();
        },
        (e: unknown) => {
          failure ??= { error: e };
          settle();
        },
      );
    }
    await waitFor(() => next === submitted);
  } catch (e) {
    failure ??= { error: e };
  }
  if (failure !== null) {
    // Tasks still running are let finish (their results dropped), so the pool is left
    // idle and the workers can forget the field; a pool that failed is not waited for.
    while (answered < submitted && !pool.failed) await new Promise<void>((r) => (wake = r));
    if (!pool.failed) await pool.broadcast('encode-forget', { key });
    throw (failure as { error: unknown }).error;
  }
  await pool.broadcast('encode-forget', { key });
  return summary.result();
}
