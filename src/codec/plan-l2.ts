/**
 * Planning for L2 bounds (rmse, psnr). The field's squared-error budget,
 * N x E^2 over its N valid values, is shared across tiles: the first pass (./first-pass.ts)
 * takes every tile's singular values, candidate plans are costed on a sample
 * of tiles, and the chosen plan gives each tile an allotment of the budget
 * that the second pass enforces tile by tile, so the whole-field RMSE holds
 * by construction and tiles can be written as they are finished.
 */
import { measure } from './measure.js';
import { cutBlock } from '../geometry.js';
import { termFor, tileGrid, type BandSource, type FieldSpec } from './tiles.js';
import type { FloatArray } from '../types.js';
import { prepareTile, type PreparedTile } from './prepare.js';
import type { Svd } from '../linalg/svd.js';
import { Method } from './payload.js';
import { Spectra } from './spectra.js';
import { encodeL2, exactPayload, pointwiseFactors, withResidualCoder, type Coded } from './tile-encode.js';
import { encodePointwise, pointwiseSearch } from './pointwise-search.js';
import { residualForMseCoded } from './rdo.js';
import { adoptSvds, firstPass, keepsTiles, sampleTiles, tileSpectrum, TRUNCATION_SHARES, type FirstPass, type TileSvds } from './first-pass.js';

/**
 * The residual plan's rank-0 rate-distortion search is not made for a tile
 * when the payload it must beat is at most this times the estimated size
 * of the pointwise coder's plain rank-0 candidate (its rough bits and a
 * sign bit per non-zero code, see estimateBytes in pointwise-search.ts): the
 * factors' payload is then small against what any rank-0 coding of the
 * tile takes. Measured (issue 10): of the 1035 tiles the residual plan
 * costed in `npm run digest`, the search's payload won on 75, each time
 * against a payload at least 1.24 times that estimate; on the full-size
 * bench fields at psnr:40, 60 and 80 (249 searches, the estimate taken of
 * plain rounding at the search's own unit step) it won on tiles whose
 * payload to beat was at least 1.25 times it. At 1.0, 301 searches of the
 * digest's are not made, and 75 of 249 on the full fields (6.7 of their
 * 15.8 s of rank-0 search).
 */
const ZERO_HOPELESS = 1;

/**
 * The residual plan's pointwise payload is finished (its blend and
 * residual coders tried, see pointwiseSearch in pointwise-search.ts) only where
 * its bytes before are at most this times those of the payload with
 * rate-distortion optimised codes over the same factors: finishing made
 * no payload smaller by more than 8.7% (1.087 times) on the 2596
 * pointwise searches of `npm run digest` (measured, issue 10), and the
 * pointwise payload never beat the other on its 378 tiles with factors;
 * on a 1024 x 1024 tile of bench/'s large field at psnr:60 it took 8
 * times the bytes, and finishing it a quarter of its search's time.
 */
const FINISH_MARGIN = 1.25;

/**
 * One way to encode every tile, as plain data (so a plan can be handed to
 * another thread): 'rank' encodes tile i at rank ranks[i] with factor steps
 * c and dw; 'residual' runs the pointwise coder at ePrime (or a rank-0
 * residual with rate-distortion optimised codes, if smaller). allot[i] is tile
 * i's share of the budget, in units of tol^2.
 */
export interface L2PlanData {
  name: string;
  kind: 'rank' | 'residual';
  ranks: Int32Array;
  c: number;
  dw: number;
  ePrime: number;
  allot: Float64Array;
  tol: number;
}

/** The chosen plan, enforced tile by tile. */
export interface L2Plan {
  name: string;
  data: L2PlanData;
  /** The tile prepared in the first pass, when the field was small enough to keep it. */
  kept(index: number): PreparedTile | undefined;
  encode(t: PreparedTile, index: number): { payload: Uint8Array; res: ReturnType<typeof measure> };
  /**
   * The payload the costing made of tile `index` under this plan, when the
   * field's tiles are not kept (see {@link planL2}), taken out of the plan:
   * for a plan on another thread, which is handed it with {@link L2Plan.give}.
   */
  take(index: number): Uint8Array | undefined;
  /** Hand the plan a payload {@link L2Plan.take} took out of the same plan on another thread; {@link L2Plan.encode} starts from it. */
  give(index: number, payload: Uint8Array): void;
}

/** A tile's payload under a plan, before its allotment is enforced. */
export function encodeWith(p: L2PlanData, t: PreparedTile, index: number): Uint8Array {
  if (p.kind === 'rank') return encodeL2(t, p.ranks[index], p.c, p.dw);
  // The pointwise coder at ePrime, or a residual whose codes are chosen for rate as well as error, at
  // rank 0 and at the rank the pointwise coder chose: the smallest (on a tie, the first of these).
  const mse = 0.97 * p.tol * p.tol;
  const pointwise = pointwiseSearch(t, p.ePrime);
  const { rank: r, bytes } = pointwise.best();
  const f = r > 0 ? pointwiseFactors(t, r, p.ePrime) : null;
  const withFactors = f && residualForMseCoded(t, f, mse);
  // The pointwise payload is finished (the blend and the residual coders tried) only where it may be the smallest.
  const factorsBytes = withFactors ? withFactors.payload.length : Infinity;
  const finished = bytes <= FINISH_MARGIN * factorsBytes ? pointwise.finish() : null;
  // The factors are those of the rank the pointwise coder chose, even when the rank-0 search wins over it.
  // That search is made last, so that it can give up against the smaller of the others (on a smooth tile
  // the factors' payload is often a fraction of the pointwise one), and is not made at all where the
  // pointwise coder's own rank-0 candidate points to a payload it cannot beat (see ZERO_HOPELESS).
  const atMost = Math.min(finished?.length ?? Infinity, factorsBytes);
  const rdo = atMost <= ZERO_HOPELESS * pointwise.zeroEstimate ? null : residualForMseCoded(t, null, mse, atMost);
  let best: Coded | null = finished === null ? null : { payload: finished, codes: null };
  if (rdo !== null && (best === null || rdo.payload.length < best.payload.length)) best = rdo;
  if (withFactors && (best === null || withFactors.payload.length < best.payload.length)) best = withFactors;
  // encodePointwise chose its residual coder already (finish()); the residual of the others is coded now, from its grid.
  return best === null || best.payload === finished ? pointwise.finish() : withResidualCoder(t, best.payload, best.codes);
}

/**
 * What a tile's payload under plan p depends on besides the tile: the
 * plan's kind and its rank and steps for the tile, or its residual
 * bounds (see {@link encodeWith}). Numbers print exactly as they are
 * (the shortest string that reads back the same).
 */
function planKey(p: L2PlanData, index: number): string {
  return p.kind === 'rank' ? `rank ${p.ranks[index]} ${p.c} ${p.dw}` : `residual ${p.ePrime} ${p.tol}`;
}

/** {@link encodeWith}, the payload kept on the tile for the second pass (see PreparedTile.costed). */
function costedWith(p: L2PlanData, t: PreparedTile, index: number): Uint8Array {
  const key = planKey(p, index);
  let payload = t.costed.get(key);
  if (payload === undefined) {
    payload = encodeWith(p, t, index);
    t.costed.set(key, payload);
  }
  return payload;
}

/**
 * First pass and plan choice; the returned plan encodes one tile at a time.
 * `first` gives the first pass's results (spectra of every tile, in tile
 * order, and the prepared tiles when the field is small enough to keep them)
 * when it was made elsewhere (on worker threads); by default it is made here
 * (with the singular values the tile trial took, `known`, by tile index).
 * `svds`: the SVDs the tile trial computed, by tile index (see
 * {@link TileSvds}). Of a field whose tiles are not kept, the payloads the
 * costing made of its sampled tiles under the chosen plan are kept for the
 * second pass (only those: a few dozen tiles' payloads).
 */
export function planL2(src: BandSource, spec: FieldSpec, tol: number, fill: Uint32Array | null, first?: FirstPass, known?: ReadonlyMap<number, Float64Array>, svds?: TileSvds): L2Plan {
  const f = first ?? firstPass(src, spec, tol, fill, known, undefined, { svds, hold: true });
  const setup = planSetup(src, spec, tol, fill, f, first !== undefined, svds);
  return setup.finish(chooseL2(f.spectra, tol, setup.tilesAt));
}

/**
 * {@link planL2} from a first pass made elsewhere (on worker threads), with
 * the candidate plans costed by `cost` (see {@link costPlansAsync}, whose
 * `cost` and `ahead` it is): the same plan.
 */
export async function planL2Async(src: BandSource, spec: FieldSpec, tol: number, fill: Uint32Array | null, first: FirstPass, cost: (plans: L2PlanData[], sample: number[], tiles: PreparedTile[]) => (k: number, ats: number[]) => Promise<number[]>, ahead: number, svds?: TileSvds): Promise<L2Plan> {
  const setup = planSetup(src, spec, tol, fill, first, true, svds);
  const plans = candidatePlans(first.spectra, tol);
  if (plans.length === 1) return setup.finish(plans[0]);
  const sample = sampleTiles(first.spectra.tiles);
  const tiles = setup.tilesAt(sample);
  return setup.finish((await costPlansAsync(plans, sample, tiles, cost(plans, sample, tiles), ahead, first.spectra)).plan);
}

/**
 * What {@link planL2} and {@link planL2Async} share: the sampled tiles the
 * costing takes (kept by the first pass, or prepared again from `src`, with
 * the SVDs handed over), and the plan made from the chosen data, taking the
 * costing's payloads of a field whose tiles are not kept.
 */
function planSetup(src: BandSource, spec: FieldSpec, tol: number, fill: Uint32Array | null, first: FirstPass, given: boolean, svds?: TileSvds): { tilesAt: (sample: number[]) => PreparedTile[]; finish: (data: L2PlanData) => L2Plan } {
  const { spectra, kept, svds: handed, sampled } = first;
  // Whether the first pass kept its tiles (see keepsTiles).
  const keep = given ? kept.length > 0 : keepsTiles(spec);
  // Internal assertion: the first pass covers every tile, in order.
  if (spectra.count !== spectra.tiles || (keep && kept.length !== spectra.tiles)) throw new Error(`the first pass planned ${spectra.count} of ${spectra.tiles} tiles`);
  let costed: { index: number; tile: PreparedTile }[] = [];
  const tilesAt = (sample: number[]): PreparedTile[] => {
    if (keep) {
      for (const i of sample) adoptSvds(kept[i], svds?.get(i));
      return sample.map((i) => kept[i]);
    }
    // The first pass's own, where it held them (see FirstPass.sampled).
    const tiles = sampled !== undefined && sample.every((i) => sampled.has(i)) ? sample.map((i) => sampled.get(i)!) : readTiles(src, spec, fill, sample, tol, undefined, (i) => handed?.get(i) ?? svds?.get(i));
    costed = tiles.map((tile, k) => ({ index: sample[k], tile }));
    return tiles;
  };
  const finish = (data: L2PlanData): L2Plan => {
    // Of a field whose tiles are not kept, the payloads the costing made of its sampled tiles under the chosen plan.
    const made = new Map<number, Uint8Array>();
    for (const { index, tile } of costed) {
      const payload = tile.costed.get(planKey(data, index));
      if (payload !== undefined) made.set(index, payload);
    }
    // Of a field whose tiles are not kept, the costing's tiles where the first pass held them: each handed once to the encoding pass.
    const held = new Map(sampled === undefined ? [] : costed.map(({ index, tile }) => [index, tile] as const));
    const heldTile = (index: number): PreparedTile | undefined => {
      const t = held.get(index);
      held.delete(index);
      return t;
    };
    return l2Plan(data, fill, (index) => (keep ? kept[index] : heldTile(index)), made);
  };
  return { tilesAt, finish };
}

/** The byte lengths of tile t's payloads under plans `ats` (its sampled tile `index`), each made once and kept on the tile (PreparedTile.costed). */
export function costTile(plans: L2PlanData[], ats: number[], t: PreparedTile, index: number): Uint8Array[] {
  return ats.map((at) => costedWith(plans[at], t, index));
}

/** Keep on tile t the payload another thread made of it under plan p (see {@link costTile}). */
export function keepCosted(p: L2PlanData, t: PreparedTile, index: number, payload: Uint8Array): void {
  t.costed.set(planKey(p, index), payload);
}

/**
 * The plan chosen from every tile's spectrum: the candidates
 * ({@link candidatePlans}) costed on the tiles at {@link sampleTiles},
 * which `tilesAt` prepares (or serves as the first pass prepared them).
 */
export function chooseL2(spectra: Spectra, tol: number, tilesAt: (indexes: number[]) => PreparedTile[]): L2PlanData {
  const plans = candidatePlans(spectra, tol);
  if (plans.length === 1) return plans[0];
  const sample = sampleTiles(spectra.tiles);
  return costPlans(plans, sample, tilesAt(sample), spectra).plan;
}

/** The field's squared-error budget, N x tol^2 over its N valid values, in units of tol^2. */
function budgetOf(spectra: Spectra): number {
  let valid = 0;
  for (let t = 0; t < spectra.tiles; t++) valid += spectra.valid[t];
  return valid;
}

/** The candidate plans, the residual plan last: one Eckart-Young plan per truncation share (where its steps come out), and the residual plan. */
export function candidatePlans(spectra: Spectra, tol: number): L2PlanData[] {
  const plans: L2PlanData[] = [];
  for (const p of eckartYoungPlans(spectra, budgetOf(spectra), TRUNCATION_SHARES, tol)) if (p) plans.push(p);
  // Residual plan: the pointwise coder at E' with uniform quantization error
  // (2E')^2 / 12 = E^2 per value (common practice, no source), a little inside; or, per tile, a
  // rank-0 residual with rate-distortion optimised codes when that is smaller (encodeWith).
  const ePrime = Math.sqrt(3) * tol * 0.97;
  plans.push({ name: 'residual', kind: 'residual', ranks: new Int32Array(0), c: 0, dw: 0, ePrime, allot: Float64Array.from(spectra.valid, (v) => 0.999 * v), tol });
  return plans;
}

/**
 * Tiles every candidate plan is costed on before one may be dropped
 * (DROP_AFTER_SHARE of the sample, at least DROP_AFTER_TILES), and how much
 * more than the cheapest its bytes on them must take for it to be dropped
 * (DROP_MARGIN). Candidates that lose usually lose by far (the rank plans
 * took twice the residual plan's bytes on the noisy bench fields at
 * psnr:80, the residual plan a fifth more than the rank plans on the
 * smooth large field), and coding a losing plan on every sampled tile cost
 * most of a large field's planning time. But a plan's lead over part of a
 * field does not always hold over the rest: on the annual-precipitation
 * block of test/codec/plan-l2.test.ts at psnr:40 the residual plan was 20%
 * behind after 5 of 12 tiles and won by 10%. Measured on the 76 plan
 * choices of `npm run digest` and that block (every plan's bytes on every
 * sampled tile, logged, and the rule replayed): these figures change none
 * of them; dropping after a quarter of the sample changed the block's.
 * Dropping earlier on a wider margin does not pay: on bench/'s
 * smooth-front at psnr:40 with 64 x 64 tiles (payloads of 7 to 30 bytes)
 * the plan that won was 1.375 times the cheapest after 2 tiles, and a
 * margin of 1.35 from 2 tiles changed two archives of `npm run digest`
 * (4% and 8% larger), while on bench/'s 4096 x 4096 field at psnr:40,
 * where the residual plan took 3.2 of the 6.8 s of costing and lost, it
 * was 1.38 to 1.47 times the cheapest from 2 tiles on.
 */
const DROP_AFTER_TILES = 2;
const DROP_AFTER_SHARE = 0.5;
const DROP_MARGIN = 0.15;

/**
 * The plan whose payloads of the sampled tiles (at indexes `sample`) take
 * the fewest bytes, and those bytes. The plans are costed a tile at a
 * time, each tile by every plan still in the running; once enough tiles
 * are costed, a plan whose bytes pass the cheapest's by DROP_MARGIN drops
 * out. A rank plan that {@link outnumbers} the cells is out
 * from the start, and one that codes many factor values
 * ({@link HEAVY_SHARE}) drops out before a tile when the estimate of its
 * bytes from the spectrum alone ({@link factorBytes}, `spectra` given)
 * passes the cheapest plan's bytes by {@link HOPELESS}: its SVDs, the
 * costliest of the costing, are then not computed. The plans share each
 * tile's SVDs (see ensureSvd: what a candidate of rank r sees does not
 * depend on what was computed before, so the plans may be costed in any
 * order), and the tiles keep them for the second pass, with their
 * payloads (see PreparedTile.costed). The cheapest plan left wins; the
 * first on a tie. `loses`, when given, tells bytes of no use to the caller
 * (a tile trial's candidate that cannot beat the best so far): once the
 * cheapest plan's bytes so far are such, the costing stops there and
 * returns them (the chosen plan would take at least as many).
 */
export function costPlans(plans: L2PlanData[], sample: number[], tiles: PreparedTile[], spectra?: Spectra, loses?: (bytes: number) => boolean): { plan: L2PlanData; bytes: number } {
  const steps = costing(plans, sample, tiles, spectra, loses);
  for (let step = steps.next(); ; ) {
    if (step.done) return step.value;
    const { k, ats } = step.value;
    step = steps.next(ats.map((at) => costedWith(plans[at], tiles[k], sample[k]).length));
  }
}

/**
 * {@link costPlans} with each sampled tile's payloads made by `cost` (on
 * other threads): `cost(k, ats)` gives the byte lengths of sampled tile k's
 * payloads under plans `ats`, in their order, and keeps the payloads where
 * the tile keeps them (PreparedTile.costed). The same plan and bytes: the
 * decisions are {@link costPlans}'s, from the same lengths. While tile k is
 * costed, the next `ahead` tiles are costed under the plans not costed
 * against an estimate that are running then (a plan dropped after tile k
 * has then been costed on a tile more than it needed).
 */
export async function costPlansAsync(
  plans: L2PlanData[],
  sample: number[],
  tiles: PreparedTile[],
  cost: (k: number, ats: number[]) => Promise<number[]>,
  ahead: number,
  spectra?: Spectra,
  loses?: (bytes: number) => boolean,
): Promise<{ plan: L2PlanData; bytes: number }> {
  // Lengths asked for, by tile, then plan; and every request made, so that none outlives the costing.
  const started = new Map<number, Map<number, Promise<number>>>();
  const requests: Promise<number[]>[] = [];
  const ask = (k: number, ats: number[]): Promise<number>[] => {
    let byPlan = started.get(k);
    if (byPlan === undefined) started.set(k, (byPlan = new Map()));
    const missing = ats.filter((at) => !byPlan.has(at));
    if (missing.length > 0) {
      const lengths = cost(k, missing);
      requests.push(lengths);
      missing.forEach((at, j) => {
        const length = lengths.then((l) => l[j]);
        // Awaited below, or never (a tile costed ahead for a plan dropped meanwhile): a failure must not go unhandled then.
        length.catch(() => undefined);
        byPlan.set(at, length);
      });
    }
    return ats.map((at) => byPlan.get(at)!);
  };
  try {
    const steps = costing(plans, sample, tiles, spectra, loses);
    for (let step = steps.next(); ; ) {
      if (step.done) return step.value;
      const { k, ats, light } = step.value;
      const lengths = ask(k, ats);
      if (light) for (let j = k + 1; j <= Math.min(k + ahead, sample.length - 1); j++) ask(j, ats);
      step = steps.next(await Promise.all(lengths));
    }
  } finally {
    await Promise.allSettled(requests);
  }
}

/**
 * The decisions of {@link costPlans}, one sampled tile at a time: it
 * yields the plans (`ats`, indexes into `plans`) whose payloads of sampled
 * tile `k` it needs next (`light`: the plans costed on every tile while
 * they run, not against an estimate first) and is handed their byte
 * lengths, in that order; it returns the plan chosen and its bytes.
 */
function* costing(plans: L2PlanData[], sample: number[], tiles: PreparedTile[], spectra?: Spectra, loses?: (bytes: number) => boolean): Generator<{ k: number; ats: number[]; light: boolean }, { plan: L2PlanData; bytes: number }, number[]> {
  const bytes = new Float64Array(plans.length);
  const running = plans.map((p) => !outnumbers(p, sample, tiles));
  // The heavy plans' estimates, summed over the tiles costed so far; they are costed after the others on each tile.
  const heavy = plans.map((p, at) => running[at] && spectra !== undefined && isHeavy(p, sample, tiles));
  const estimate = new Float64Array(plans.length);
  const dropAfter = Math.max(DROP_AFTER_TILES, Math.ceil(DROP_AFTER_SHARE * sample.length));
  for (let k = 0; k < sample.length; k++) {
    const lights = plans.flatMap((_p, at) => (running[at] && !heavy[at] ? [at] : []));
    if (lights.length > 0) {
      const lengths = yield { k, ats: lights, light: true };
      lights.forEach((at, j) => (bytes[at] += lengths[j]));
    }
    const light = leastOf(bytes, running, (at) => !heavy[at]);
    let sv2: Float64Array | undefined;
    for (const [at, p] of plans.entries()) {
      if (!(running[at] && heavy[at])) continue;
      sv2 ??= wholeSpectrum(spectra!, sample[k], tiles[k], p.tol);
      estimate[at] += factorBytes(p, sv2, sample[k], tiles[k].m, tiles[k].n);
      if (estimate[at] > HOPELESS * light) running[at] = false;
      else bytes[at] += (yield { k, ats: [at], light: false })[0];
    }
    if (k + 1 >= dropAfter) {
      const least = leastOf(bytes, running, () => true);
      for (let at = 0; at < plans.length; at++) if (bytes[at] > (1 + DROP_MARGIN) * least) running[at] = false;
    }
    // Bytes only grow: when the cheapest so far already loses, so does the plan chosen.
    if (loses?.(leastOf(bytes, running, () => true))) break;
  }
  let best = -1;
  for (let at = 0; at < plans.length; at++) if (running[at] && (best < 0 || bytes[at] < bytes[best])) best = at;
  return { plan: plans[best], bytes: bytes[best] };
}

/** The fewest bytes of the plans running and picked (Infinity for none). */
function leastOf(bytes: Float64Array, running: boolean[], picked: (at: number) => boolean): number {
  let least = Infinity;
  for (let at = 0; at < bytes.length; at++) if (running[at] && picked(at)) least = Math.min(least, bytes[at]);
  return least;
}

/**
 * A rank plan codes at least this many factor values a cell, r (m + n)
 * against m n over the sampled tiles, for it to be dropped on an estimate
 * ({@link costPlans}). Below it the estimate is too rough to go by (the
 * factors of smooth tiles are smooth, and their prediction codes them in
 * a third to a half of the estimate: measured on bench/'s smooth fields),
 * and the plan is cheap to cost anyway (a few low-rank SVDs).
 */
const HEAVY_SHARE = 0.5;
/**
 * How far a heavy plan's estimate must pass the cheapest plan's bytes for
 * it to be dropped. Every heavy plan costed in the L2 runs of `npm run
 * digest` and in the packs of bench/'s eight full-size small fields at
 * psnr:40, 60 and 80 (885 costings of a sampled tile, the sums so far
 * logged after each; scratch measurement, issue 10) took 0.818 to 1.229
 * times its estimate, so a plan dropped here would have taken at least
 * 1.06 times the bytes of the cheapest; of the plans whose estimate passed
 * 1.25 times the cheapest, the one nearest took 1.105 times its bytes.
 * The plan estimated furthest above its bytes (basin-stack at psnr:80,
 * 0.818) came out 0.4% below the cheapest: a factor near 1.2 would drop
 * a plan that wins. At 1.5 before, turbulence's rank plan at psnr:40 (a
 * rank-219 SVD of its 512 x 512 tile, about half its pack) was estimated at
 * 1.47 times the residual plan's bytes and costed, to take 1.36 times them.
 */
const HOPELESS = 1.3;

/** Whether a rank plan codes at least {@link HEAVY_SHARE} factor values a cell of the sampled tiles. */
function isHeavy(p: L2PlanData, sample: number[], tiles: PreparedTile[]): boolean {
  return p.kind === 'rank' && factorShare(p, sample, tiles) >= HEAVY_SHARE;
}

/**
 * An estimate of the bytes of a rank plan's factors on tile `index`, from
 * its squared singular values (`sv2`, in units of tol^2, descending) and
 * the plan's steps alone (no SVD vectors): left vector k has m values of
 * RMS 1/sqrt(m) at step c / s_k, the right factor's row k n values of RMS
 * s_k / sqrt(n) at step dw, and a Gaussian of deviation sigma quantized
 * with a step d much below it takes log2(sigma / d) + 2.047 bits a value
 * (its differential entropy, log2(sigma sqrt(2 pi e)), less log2 d: Cover
 * and Thomas, Elements of Information Theory, theorem 8.3.1; from memory),
 * taken as 0 where that is negative.
 */
export function factorBytes(p: L2PlanData, sv2: Float64Array, index: number, m: number, n: number): number {
  const r = Math.min(p.ranks[index], sv2.length);
  let bits = 0;
  for (let k = 0; k < r; k++) {
    const s = Math.sqrt(Math.max(0, sv2[k])) * p.tol;
    bits += m * gaussianBits(s / (p.c * Math.sqrt(m))) + n * gaussianBits(s / (p.dw * Math.sqrt(n)));
  }
  return bits / 8;
}

/**
 * A sampled tile's whole spectrum for {@link factorBytes}: as the store
 * holds it, or, where the store holds only the values a cut could reach
 * (CLI parts, src/parts/plan-pieces.ts), as the first pass took it
 * ({@link tileSpectrum} of the same prepared tile).
 */
function wholeSpectrum(spectra: Spectra, index: number, t: PreparedTile, tol: number): Float64Array {
  if (spectra.length[index] === spectra.full[index]) return spectra.values(index);
  return tileSpectrum(t, tol).map((v) => (v / tol) * (v / tol));
}

/** Bits a value of a Gaussian whose deviation is `ratio` quantization steps (see {@link factorBytes}). */
function gaussianBits(ratio: number): number {
  return ratio > 0 ? Math.max(0, Math.log2(ratio) + GAUSSIAN_BITS) : 0;
}

/** log2 sqrt(2 pi e): the differential entropy of a unit Gaussian, in bits. */
const GAUSSIAN_BITS = 0.5 * Math.log2(2 * Math.PI * Math.E);

/** Factor values a rank plan codes on the sampled tiles a cell, r (m + n) against m n summed. */
function factorShare(p: L2PlanData, sample: number[], tiles: PreparedTile[]): number {
  let values = 0;
  let cells = 0;
  for (const [k, i] of sample.entries()) {
    values += p.ranks[i] * (tiles[k].m + tiles[k].n);
    cells += tiles[k].m * tiles[k].n;
  }
  return values / Math.max(1, cells);
}

/**
 * Whether a rank plan codes as many factor values on the sampled tiles as
 * they have cells, r (m + n) against m n summed: such a plan is not costed
 * (it drops out before its first tile). On the 76 plan choices of `npm run
 * digest` every such plan lost, by 30% to 3 times the bytes of the
 * residual plan, while plans with 0.6 to 0.85 factor values a cell won
 * eight of them (time x space stacks); the residual plan codes one value a
 * cell, at a step from the same budget.
 */
function outnumbers(p: L2PlanData, sample: number[], tiles: PreparedTile[]): boolean {
  return p.kind === 'rank' && factorShare(p, sample, tiles) >= 1;
}

/**
 * A plan from its data: each tile encoded as the plan says, then held to its
 * allotment by tighter residual coding, then exact storage. `kept` serves
 * tiles prepared in the first pass (none by default).
 */
export function l2Plan(data: L2PlanData, fill: Uint32Array | null, kept: (index: number) => PreparedTile | undefined = () => undefined, made: Map<number, Uint8Array> = new Map()): L2Plan {
  const tol = data.tol;
  return {
    name: data.name,
    data,
    kept,
    encode(t, index) {
      const allotment = data.allot[index];
      // Of a tile the costing sampled, its payload under this plan is made already (on the tile, or
      // `made` by the costing of a tile prepared from the same values when tiles are not kept).
      let payload = t.costed.get(planKey(data, index)) ?? made.get(index) ?? encodeWith(data, t, index);
      made.delete(index);
      // Under a field layer a tile's own spectrum is what the layer left, often near the rounding
      // of its factors: a rank plan's factors may then not come out, and the tile falls back to exact
      // storage (three tiles of 192 took 48 kB of a 74 kB archive, bench/'s basin-stack at
      // psnr:60 with a rank-8 layer and 64 x 64 tiles). The residual coder at the tile's allotment instead.
      if (t.layer && data.kind === 'rank' && payload[0] === Method.Exact) payload = encodePointwise(t, Math.sqrt((3 * allotment) / Math.max(1, t.valid)) * tol * 0.97);
      let res = measure(payload, t, fill);
      // Enforce the tile's allotment: tighter residual coding, then exact storage.
      for (const f of [0.9, 0.7, 0.5]) {
        if (fits(res.tally.rmse, t.valid, allotment, tol)) break;
        const e = Math.sqrt((3 * allotment) / Math.max(1, t.valid)) * tol * f;
        payload = encodePointwise(t, e);
        res = measure(payload, t, fill);
      }
      if (!fits(res.tally.rmse, t.valid, allotment, tol)) {
        payload = exactPayload(t);
        res = measure(payload, t, fill);
      }
      // The tile is done: a kept tile's SVDs and payloads need not outlive it (made again, they would be the same).
      t.svds.clear();
      t.costed.clear();
      return { payload, res };
    },
    take(index) {
      const payload = made.get(index);
      made.delete(index);
      return payload;
    },
    give(index, payload) {
      made.set(index, payload);
    },
  };
}

/** Whether a tile's squared error, valid x rmse^2, is within its allotment (units of tol^2). */
function fits(rmse: number, valid: number, allotment: number, tol: number): boolean {
  if (valid === 0) return true;
  const r = rmse / tol;
  return valid * r * r <= allotment;
}

/**
 * Prepared tiles at the given indexes (ascending), reading only the bands
 * of rows that hold them, as {@link tilesOf} reads them; `check` sees each
 * tile's values first; `svds` gives the SVDs computed before of a tile
 * prepared from the same values (see {@link TileSvds}).
 */
export function readTiles(
  src: BandSource,
  spec: FieldSpec,
  fill: Uint32Array | null,
  indexes: number[],
  tol: number,
  check?: (index: number, tile: FloatArray) => void,
  svds?: (index: number) => ReadonlyMap<number, Svd> | undefined,
): PreparedTile[] {
  const [gr, gc] = tileGrid(spec);
  const out: PreparedTile[] = [];
  let at = -1;
  let band: FloatArray | null = null;
  for (const index of indexes) {
    const s = Math.floor(index / (gr * gc));
    const ti = Math.floor((index % (gr * gc)) / gc);
    const r0 = ti * spec.tileRows;
    const rows = Math.min(spec.tileRows, spec.rows - r0);
    if (s * gr + ti !== at) {
      band = src.band(s * spec.rows + r0, rows);
      at = s * gr + ti;
    }
    const j0 = (index % gc) * spec.tileCols;
    const m = rows;
    const n = Math.min(spec.tileCols, spec.cols - j0);
    const tile = cutBlock(band as FloatArray, spec.cols, 0, j0, m, n);
    check?.(index, tile);
    const t = prepareTile(tile, m, n, spec.dtype, fill, tol, spec.progressive ? 'doubling' : 'one', termFor(spec, index, m, n));
    adoptSvds(t, svds?.(index));
    out.push(t);
  }
  return out;
}

/**
 * The Eckart-Young plans, one per truncation share: discard the field-wide
 * smallest singular values until their squares reach share x budget; the
 * rest of the budget goes to factor quantization, half to each factor,
 * with uniform noise step^2 / 12 per coefficient. Null where the steps do
 * not come out positive and finite.
 *
 * The values are visited in ascending order of their key (the largest
 * value at or after them in their tile's descending spectrum, so a tile's
 * larger value is never cut before its smaller ones), ties by tile, then
 * smallest first within a tile: a merge of the tiles' spectra through a
 * heap of tiles, so nothing is held beyond the store and a few numbers per
 * tile. A tile whose next cut does not fit a share is closed for it: its
 * larger values cannot be cut either.
 */
export function eckartYoungPlans(spectra: Spectra, budget: number, shares: readonly number[], tol: number): (L2PlanData | null)[] {
  const count = spectra.tiles;
  const cuts = shares.map(() => ({ total: 0, cut: new Float64Array(count), ranks: Int32Array.from(spectra.full), closed: new Uint8Array(count) }));
  // Per tile: the next value's position (from the end of its spectrum) and its key.
  const next = new Int32Array(count);
  const key = new Float64Array(count);
  const heap = new Int32Array(count);
  let size = 0;
  const less = (a: number, b: number) => (key[a] - key[b] || a - b) < 0;
  const down = (i: number) => {
    const t = heap[i];
    for (;;) {
      let c = 2 * i + 1;
      if (c >= size) break;
      if (c + 1 < size && less(heap[c + 1], heap[c])) c++;
      if (!less(heap[c], t)) break;
      heap[i] = heap[c];
      i = c;
    }
    heap[i] = t;
  };
  // Each tile enters with the key of its smallest value; the heap is then built bottom-up.
  for (let t = 0; t < count; t++) {
    const k = spectra.length[t];
    if (k === 0) continue;
    next[t] = k - 1;
    key[t] = Math.max(0, spectra.values(t)[k - 1]);
    heap[size++] = t;
  }
  for (let i = (size >> 1) - 1; i >= 0; i--) down(i);
  while (size > 0) {
    const t = heap[0];
    const v2 = spectra.values(t)[next[t]];
    for (const [s, c] of cuts.entries()) {
      if (c.closed[t]) continue;
      if (!(c.total + v2 <= shares[s] * budget)) {
        c.closed[t] = 1;
        continue;
      }
      c.total += v2;
      c.cut[t] += v2;
      c.ranks[t] -= 1;
    }
    // The tile's next value, or out of the heap when it has none or every share has closed it.
    if (next[t] > 0 && cuts.some((c) => !c.closed[t])) {
      next[t]--;
      key[t] = Math.max(key[t], spectra.values(t)[next[t]]);
    } else heap[0] = heap[--size];
    down(0);
  }
  return cuts.map((c, s) => stepsFor(spectra, budget, shares[s], c.total, c.cut, c.ranks, tol));
}

/** A plan's steps and allotments from its cut: what is left of the budget goes to factor quantization. */
function stepsFor(spectra: Spectra, budget: number, share: number, total: number, cut: Float64Array, ranks: Int32Array, tol: number): L2PlanData | null {
  const q = (budget - total) * 0.9;
  // Half of q to each factor, as uniform rounding noise step^2 / 12 per coefficient:
  // the right factor with one step dw, the left with step c / s_k for rank k (see quantizeFactors).
  let sumRN = 0;
  let sumRM = 0;
  for (let t = 0; t < ranks.length; t++) {
    sumRN += ranks[t] * spectra.n[t];
    sumRM += ranks[t] * spectra.m[t];
  }
  const dw = sumRN > 0 ? tol * Math.sqrt((6 * q) / sumRN) : tol;
  const c = sumRM > 0 ? tol * Math.sqrt((6 * q) / sumRM) : tol;
  if (!(dw > 0 && c > 0 && Number.isFinite(dw) && Number.isFinite(c))) return null;
  // Each tile's allotment: its truncation error plus its expected quantization noise,
  // scaled so the allotments add up to the budget.
  const predicted = new Float64Array(ranks.length);
  for (let t = 0; t < ranks.length; t++) {
    const r = ranks[t];
    predicted[t] = cut[t] + (r * spectra.n[t] * (dw / tol) ** 2) / 12 + (r * spectra.m[t] * (c / tol) ** 2) / 12;
  }
  let sum = 0;
  for (const p of predicted) sum += p;
  // A hair inside the budget, so rounding in the sums cannot tip the total over.
  const scale = sum > 0 ? (0.999 * budget) / sum : 0;
  return { name: `eckart-young ${share}`, kind: 'rank', ranks, c, dw, ePrime: 0, allot: predicted.map((p) => p * scale), tol };
}
