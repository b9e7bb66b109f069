/**
 * Encoding a field's tiles on a {@link WorkerPool}. The field-level choices
 * (value range, tolerance, L2 plan) are made first, as the synchronous
 * encoder makes them (the per-tile work of the L2 planning pass on the
 * pool: each tile's first pass, then the candidate plans' costing on the
 * sampled tiles); each worker is handed them once, then tiles one by one. Results
 * come back in any order and are emitted in tile order, so the archive is
 * byte-identical for every thread count.
 *
 * This thread reads the input bands and writes the payloads while the
 * workers encode; at most {@link BANDS_PER_THREAD} bands of tiles per thread
 * are in flight (read and not yet written), which bounds the memory.
 */
import { tileGrid } from '../geometry.js';
import { encodeTile, fieldBasis, FieldSummary, type FieldPrior, termFor, tilesOf, tileToEncode, type BandSource, type EncodedTile, type FieldChoices, type FieldResult, type FieldSpec, type TileOutcome } from '../codec/field.js';
import { costTile, keepCosted, l2Plan, planL2Async, type L2Plan, type L2PlanData } from '../codec/plan-l2.js';
import { firstPassTile, keepsTiles, SvdHandoff, type FirstPass, type FirstPassTile, type TileSvds } from '../codec/first-pass.js';
import { Spectra } from '../codec/spectra.js';
import type { PreparedTile } from '../codec/prepare.js';
import type { Svd } from '../linalg/svd.js';
import type { MosaicWork, PickedTile } from '../codec/auto-tile.js';
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
  /** Prepare `tile` as the L2 first pass does (see encodeWithChoices). */
  full?: boolean;
  /** The field layer's term for the tile (see termFor in tiles.ts), computed in the calling thread; none without a layer. */
  term?: Float64Array | null;
  /** The tile's payload under the field's L2 plan as the plan's costing made it in the calling thread (see L2Plan.take). */
  costed?: Uint8Array;
}

/*
 * Encoding tasks and their answers are copied between threads, never
 * transferred. A transfer detaches the sender's buffer, and once a thread
 * has detached any buffer, V8 checks for detached buffers in all of that
 * thread's typed-array code from then on: detaching one 8-byte buffer
 * before a one-thread pack of bench/'s quick large field at rel:1e-3 made
 * it 0.99 -> 1.15 s of CPU (best of 5), and packAsync of the full 4096 x
 * 4096 large field at rel:1e-3 on 2 threads took 6.1 s with transfers
 * against 4.8 s with copies (medians of 6, issue 10 measurements). A copy
 * of a tile costs a memcpy, little beside encoding it.
 */

/** Field choices by key, in each worker. */
const fields = new Map<number, FieldChoices>();
/** Candidate plans being costed, by key, in each worker. */
const costings = new Map<number, L2PlanData[]>();
let nextKey = 1;

/** A payload as its own buffer: a view would copy the whole buffer it is part of across threads. */
function owned(payload: Uint8Array): Uint8Array {
  return payload.byteOffset === 0 && payload.byteLength === payload.buffer.byteLength ? payload : payload.slice();
}

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
    const term = body.term ?? null;
    if (body.costed) c.plan!.give(body.index, body.costed);
    const t = body.prepared ?? (body.full ? firstPassTile(body.tile!, body.m, body.n, c, c.fill, c.tol, true, undefined, undefined, term).tile! : tileToEncode(c, body.index, body.tile!, body.m, body.n, term));
    const o = encodeTile(c, t, body.index);
    return { result: { ...o, payload: owned(o.payload) } };
  },
  'cost-setup'(body: { key: number; plans: L2PlanData[] }) {
    costings.set(body.key, body.plans);
    return { result: null };
  },
  'cost-tile'(body: { key: number; index: number; ats: number[]; tile: PreparedTile }) {
    const plans = costings.get(body.key);
    // Internal assertion: the set-up message always precedes a costing's tiles in the port.
    if (plans === undefined) throw new Error(`costing of tile ${body.index} of an unknown plan choice (key ${body.key})`);
    const before = new Set(body.tile.svds.keys());
    const payloads = costTile(plans, body.ats, body.tile, body.index).map(owned);
    // The SVDs computed here go back too: the calling thread's tile keeps them, as it would have costed in one thread (for the later passes).
    const svds = [...body.tile.svds].filter(([rung]) => !before.has(rung));
    return { result: { payloads, svds } };
  },
  'cost-forget'(body: { key: number }) {
    costings.delete(body.key);
    return { result: null };
  },
  'plan-tile'(body: { tile: FloatArray; m: number; n: number; spec: Pick<FieldSpec, 'dtype' | 'progressive'>; fill: Uint32Array | null; tol: number; keep: boolean; known?: Float64Array; term?: Float64Array | null; seen?: boolean }) {
    // With `seen`, the singular values themselves go back too (a tile trial hands them to the field's first pass as they are).
    let s: Float64Array | undefined;
    const f = firstPassTile(body.tile, body.m, body.n, body.spec, body.fill, body.tol, body.keep, body.known, body.seen ? (values) => (s = values) : undefined, body.term ?? null);
    return { result: s ? { ...f, s } : f };
  },
  'encode-forget'(body: { key: number }) {
    fields.delete(body.key);
    return { result: null };
  },
};

/**
 * Post a set-up task to every thread of `pool` without waiting for the
 * answers: each thread runs its tasks in the order they were posted, so the
 * tasks posted after it find it done, and the calling thread starts on them
 * while a worker still starts up (a worker started for the call takes
 * 100-250 ms to load its code). The promise settles when all have answered;
 * it is handled here, so a failure waits for the caller's await.
 */
function announce(pool: WorkerPool, kind: string, body: unknown): Promise<void> {
  const answered = pool.broadcast(kind, body);
  answered.catch(() => undefined);
  return answered;
}

/**
 * Run `post` for every item, at most `limit` at a time, and hand each result
 * to `use` in item order as soon as the ones before it are used. The next
 * item is taken (a tile cut out of its band) only when no task waits in the
 * pool's queue: a tile is cut as a thread is about to need it, between the
 * calling thread's own tasks, instead of every tile within the limit at
 * once before the calling thread starts on one (48 MiB of new tiles for
 * bench/'s 4096 x 4096 field, about 150 ms in which the calling thread
 * encoded nothing). At the first failure (of a task or of `use`) no more
 * items are taken; tasks still running are let finish (their results dropped, so a caller's pool is left
 * idle) unless the pool itself failed; then the failure is thrown.
 */
async function inOrder<T, R>(pool: WorkerPool, items: Iterable<T>, post: (item: T) => Promise<R>, use: (r: R, k: number) => void, limit: number): Promise<void> {
  const done = new Map<number, R>();
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
    while (!ready()) await new Promise<void>((r) => (wake = r));
  };
  const finished = (k: number, r: R) => {
    if (failure !== null) return;
    done.set(k, r);
    try {
      for (let d = done.get(next); d !== undefined; d = done.get(next)) {
        done.delete(next);
        use(d, next);
        next++;
      }
    } catch (e) {
      failure = { error: e };
    }
  };
  try {
    for (const item of items) {
      // The queue may hold another call's tasks (a caller's pool): with none of this call's in flight, nothing would wake this one.
      await waitFor(() => failure !== null || (submitted - next < limit && (pool.queued === 0 || answered === submitted)));
      if (failure !== null) break;
      const k = submitted++;
      post(item).then(
        (r) => {
          finished(k, r);
          settle();
        },
        (e: unknown) => {
          failure ??= { error: e };
          settle();
        },
      );
    }
    await waitFor(() => failure !== null || next === submitted);
  } catch (e) {
    failure ??= { error: e };
  }
  if (failure !== null) {
    await waitFor(() => answered === submitted || pool.failed);
    throw (failure as { error: unknown }).error;
  }
}

/**
 * Encode every tile of a field on `pool`, handing each to `emit` in tile
 * order; the same result, and the same payloads, as encodeField. For L2
 * bounds the planning pass (each tile's spectrum) runs on the pool too;
 * the plan is then chosen here, as encodeField chooses it.
 */
export async function encodeFieldParallel(src: BandSource, spec: FieldSpec, emit: (index: number, tile: EncodedTile) => void, pool: WorkerPool, prior?: FieldPrior): Promise<FieldResult> {
  const c = prior ? { ...prior.basis } : fieldBasis(src, spec);
  if (!c.pointwise) c.plan = prior?.plan ?? (await planL2Parallel(src, spec, c, pool, prior?.spectra, prior?.svds));
  return encodeWithChoices(src, spec, c, pool, (index, o) => emit(index, { payload: o.payload, stats: o.stats }), false, prior?.done);
}

/**
 * Encode every tile of `src` (a field of `spec`) under choices `c` made
 * beforehand, on `pool`, handing each outcome to `use` in tile order. With
 * `full`, each tile is first prepared as the L2 first pass prepares the
 * tiles a single pack keeps (parts of a run, whose plan
 * says so, encode their tiles from the same state).
 */
export async function encodeWithChoices(src: BandSource, spec: FieldSpec, c: FieldChoices, pool: WorkerPool, use: (index: number, o: TileOutcome) => void, full = false, done?: ReadonlyMap<number, TileOutcome>): Promise<FieldResult> {
  const limit = BANDS_PER_THREAD * pool.threads * tileGrid(spec)[1];
  const key = nextKey++;
  const { plan, ...rest } = c;
  const setup = announce(pool, 'encode-setup', { key, choices: { ...rest, plan: plan?.data ?? null } satisfies WireChoices });
  const summary = new FieldSummary(c);
  const post = ({ index, tile, m, n }: { index: number; tile: FloatArray; m: number; n: number }) => {
    // A tile the tile trial encoded already (see FieldPrior).
    const known = done?.get(index);
    if (known) return Promise.resolve(known);
    const prepared = c.plan?.kept(index);
    if (prepared) return pool.run<TileOutcome>('encode-tile', { key, index, m, n, prepared } satisfies TileTask, []);
    const term = termFor(spec, index, m, n);
    // A tile the plan's costing encoded already (of a field whose tiles are not kept): its payload goes with it, as encodeField uses it.
    const costed = c.plan?.take(index);
    return pool.run<TileOutcome>('encode-tile', { key, index, m, n, tile, full, ...(term ? { term } : {}), ...(costed ? { costed } : {}) } satisfies TileTask);
  };
  const finished = (o: TileOutcome, index: number) => {
    // The tally crossed threads as plain fields; give it its class back.
    const outcome = { ...o, tally: Object.assign(new ErrorTally(), o.tally) };
    summary.add(outcome);
    use(index, outcome);
  };
  try {
    // Tiles encoded already are not cut out again.
    const skip = (index: number) => done?.has(index) === true || c.plan?.kept(index) !== undefined;
    await inOrder(pool, tilesOf(src, spec, skip), post, finished, limit);
    await setup;
  } finally {
    if (!pool.failed) await pool.broadcast('encode-forget', { key });
  }
  return summary.result();
}

/**
 * Encode `tiles` (a tile trial's sample, see chooseTileAsync) under the
 * pointwise choices `c` on `pool`, all at once; the outcomes in their order,
 * the same as encodeTile gives in one thread.
 */
export async function encodeTilesOn(pool: WorkerPool, c: FieldChoices, tiles: PickedTile[]): Promise<TileOutcome[]> {
  const key = nextKey++;
  const { plan: _, ...rest } = c;
  const setup = announce(pool, 'encode-setup', { key, choices: { ...rest, plan: null } satisfies WireChoices });
  try {
    const runs = tiles.map(({ index, tile, m, n, term }) => pool.run<TileOutcome>('encode-tile', { key, index, m, n, tile, ...(term ? { term } : {}) } satisfies TileTask));
    await setup;
    // The tallies crossed threads as plain fields; give them their class back.
    return (await Promise.all(runs)).map((o) => ({ ...o, tally: Object.assign(new ErrorTally(), o.tally) }));
  } finally {
    if (!pool.failed) await pool.broadcast('encode-forget', { key });
  }
}

/**
 * The L2 plan of a field whose basis `c` is made (pointwise false): the
 * first pass (every tile's spectrum) on `pool`, then the plan chosen here,
 * as {@link planL2} makes it in one thread (with the singular values the
 * tile trial took, `known`, and the SVDs it computed, `svds`, by tile index).
 */
export async function planL2Parallel(src: BandSource, spec: FieldSpec, c: FieldChoices, pool: WorkerPool, known?: ReadonlyMap<number, Float64Array>, svds?: TileSvds): Promise<L2Plan> {
  const first = await firstPassOn(pool, src, spec, c.tol, c.fill, known);
  const work = costingOn(pool);
  let costing: ReturnType<typeof work> | null = null;
  try {
    return await planL2Async(src, spec, c.tol, c.fill, first, (plans, sample, tiles) => (costing = work(plans, sample, tiles)).cost, pool.threads - 1, svds);
  } finally {
    await (costing as ReturnType<typeof work> | null)?.done();
  }
}

/**
 * The L2 planning's first pass over every tile of a field on `pool`, as
 * firstPass makes it in one thread (with the singular values the tile
 * trial took, `known`, by tile index; each tile's handed to `seen`).
 */
async function firstPassOn(pool: WorkerPool, src: BandSource, spec: FieldSpec, tol: number, fill: Uint32Array | null, known?: ReadonlyMap<number, Float64Array>, seen?: (index: number, s: Float64Array) => void): Promise<FirstPass> {
  const limit = BANDS_PER_THREAD * pool.threads * tileGrid(spec)[1];
  // Of each tile's first pass, the planner keeps its spectrum in a flat store (and the prepared tile only for small fields).
  const [gr, gc] = tileGrid(spec);
  const keep = keepsTiles(spec);
  const spectra = new Spectra((spec.slices ?? 1) * gr * gc);
  const first: FirstPass = { spectra, kept: [] };
  // Of a field whose tiles are not kept, the sampled tiles come back with their SVDs, for the costing (as firstPass hands them).
  const handoff = new SvdHandoff(spectra.tiles, keep);
  const body = { spec: { dtype: spec.dtype, progressive: spec.progressive }, fill, tol, ...(seen ? { seen: true } : {}) };
  const post = ({ index, tile, m, n }: { index: number; tile: FloatArray; m: number; n: number }) => {
    const values = known?.get(index);
    const term = termFor(spec, index, m, n);
    return pool.run<FirstPassTile & { s?: Float64Array }>('plan-tile', { ...body, keep: keep || handoff.wants(index), tile, m, n, ...(values ? { known: values } : {}), ...(term ? { term } : {}) });
  };
  const take = (f: FirstPassTile & { s?: Float64Array }, index: number) => {
    spectra.add(f);
    if (keep) first.kept.push(f.tile!);
    else handoff.add(index, f.tile);
    if (seen) seen(index, f.s!);
  };
  await inOrder(pool, tilesOf(src, spec), post, take, limit);
  return { ...first, svds: handoff.handed };
}

/**
 * Candidate plans costed on `pool`, a sampled tile a task (the tile's plans
 * share its SVDs), each payload kept on the tile (see costPlansAsync):
 * `done` when the costing is over.
 */
function costingOn(pool: WorkerPool): (plans: L2PlanData[], sample: number[], tiles: PreparedTile[]) => { cost: (k: number, ats: number[]) => Promise<number[]>; done: () => Promise<void> } {
  return (plans, sample, tiles) => {
    const key = nextKey++;
    // Awaited by every request, or by done.
    const setup = announce(pool, 'cost-setup', { key, plans });
    const cost = async (k: number, ats: number[]): Promise<number[]> => {
      const [, { payloads, svds }] = await Promise.all([setup, pool.run<{ payloads: Uint8Array[]; svds: [number, Svd][] }>('cost-tile', { key, index: sample[k], ats, tile: tiles[k] })]);
      payloads.forEach((payload, j) => keepCosted(plans[ats[j]], tiles[k], sample[k], payload));
      for (const [rung, svd] of svds) if (!tiles[k].svds.has(rung)) tiles[k].svds.set(rung, svd);
      return payloads.map((payload) => payload.length);
    };
    const done = async () => {
      await setup.catch(() => undefined);
      if (!pool.failed) await pool.broadcast('cost-forget', { key });
    };
    return { cost, done };
  };
}

/** An L2 tile trial's first passes and costings on `pool` (see MosaicWork in auto-tile.ts). */
export function mosaicWorkOn(pool: WorkerPool): MosaicWork {
  return {
    firstPass: (src, spec, tol, fill, seen) => firstPassOn(pool, src, spec, tol, fill, undefined, seen),
    costing: costingOn(pool),
    ahead: pool.threads - 1,
  };
}
