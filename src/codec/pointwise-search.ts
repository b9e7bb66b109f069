/**
 * The pointwise search of a tile: candidate payloads at rank 0 (plain, and
 * on the tile's value lattice) and at ranks 1, 2, ... of the tile's
 * truncated SVD, each checked against the bound (./tile-encode.ts:
 * correct), ranked by an estimate of its size, the best few coded for
 * real, and the smallest finished with the blend predictor, the residual
 * coder that suits it and the exact payload where that may win.
 */
import { ensureSvd, PARTIAL_RANK, type PreparedTile } from './prepare.js';
import { payloadHead } from './payload.js';
import { binary32Below } from './steps.js';
import { encodeIntsWithin } from './code-encode.js';
import { blendVariant, correct, EXACT_GATE, exactPayload, formed, giveBack, lowRankPayload, orExact, pointwiseFactors, rawBytes, searchGrids, SYMBOLS_MARGIN, withResidualCoder, type Coded, type Correction, type Factors, type SearchScratch } from './tile-encode.js';

/**
 * Rank-0 candidates: the plain one (step 2e around the tile's centre) and,
 * when the tile's values lie on an integer lattice, one whose step is the
 * largest odd multiple K of the lattice step with (K - 1) / 2 steps within e,
 * around a centre on the lattice: every reconstructed value is then a
 * lattice point within e (exact when e is below half the lattice step).
 */
function rankZero(t: PreparedTile, e: number): Checked[] {
  const out: Checked[] = [checked(t, null, e, undefined, undefined, searchGrids)];
  const { quantum, origin } = t.lattice;
  if (quantum > 0 && e >= 0) {
    const k = 2 * Math.floor(e / quantum) + 1;
    const step = k * quantum;
    const center = origin + Math.round((t.center - origin) / quantum) * quantum;
    if (step <= 2 ** 52 && Number.isFinite(center)) out.push(checked(t, null, Math.max(e, Number.MIN_VALUE), step, center, searchGrids));
  }
  return out;
}

/**
 * A candidate of the pointwise search: its payload with the predictors
 * other than the blend, and how to code it again with the blend allowed.
 * The blend costs more to compute than the others together (its five
 * parts and their error grids), so the search ranks its candidates
 * without it and tries it on the winner only.
 */
interface Candidate extends Coded {
  withBlend(): Coded;
}

/** A candidate checked (its residual chosen by correct() without the blend) and its size estimated, not yet coded. */
interface Checked {
  f: Factors | null;
  corr: Correction;
  estimate: number;
}

function checked(t: PreparedTile, f: Factors | null, e: number, step = binary32Below(2 * e), center = t.center, search: SearchScratch | null = null): Checked {
  const corr = correct(t, f, e, step, center, false, search);
  return { f, corr, estimate: estimateBytes(t, f, corr) };
}

/**
 * A checked candidate coded for real, or null when its residual stream
 * alone is longer than `atMost` bytes (see {@link smallest}).
 */
function codedCandidate(t: PreparedTile, { f, corr: chosen }: Checked, atMost = Infinity): Candidate | null {
  // The residual coded once, here: the payload and, for the winner, the blend's comparison use it.
  let corr = chosen;
  if (chosen.q && !chosen.coded) {
    const coded = encodeIntsWithin(chosen.q, t.m, t.n, t.classes.special > 0 ? t.classes.codes : null, atMost);
    if (coded === null) return null;
    corr = { ...chosen, coded };
  }
  const payload = lowRankPayload(t, f, corr);
  const codes = corr.q;
  return { payload, codes, withBlend: () => blendVariant(t, f, corr) ?? { payload, codes } };
}

/** Candidate ranks tried by the pointwise search. */
const RANKS = [0, 1, 2, 3, 4, 5, 6, 8, 10, 12, 14, 16, 20, 24, 28, 32, 40, 48, 56, 64, 80, 96, 112, 128, 160, 192, 224, 256];

/**
 * The smallest payload meeting the pointwise bound e (absolute), over ranks
 * 0.. and the exact method (coded only when it may win, see EXACT_GATE).
 * The rank-0 candidates are coded for real, the others only when their
 * estimated size ranks among the best few (see searchRanks).
 */
export function encodePointwise(t: PreparedTile, e: number): Uint8Array {
  return pointwiseSearch(t, e).finish();
}

/** {@link encodePointwise} in steps: the search, its smallest candidate, then its payload finished (see {@link pointwiseSearch}). */
export interface PointwiseSearch {
  /**
   * What a tile trial weighs the tile by: best()'s bytes, or, where the
   * first candidate's stream is dense (see DENSE_BITS), the bytes of the
   * first alone (no fewer), the others then coded only by best().
   */
  trialBytes: number;
  /** The estimated size ({@link estimateBytes}) of the plain rank-0 candidate (step 2e around the tile's centre); Infinity when there was no search. */
  zeroEstimate: number;
  /** The rank of the payload finish() gives, and the bytes of the smallest candidate before finish() tries the blend and the residual coders on it (computed once). */
  best(): { rank: number; bytes: number };
  /** The payload of {@link encodePointwise} (made once). */
  finish(): Uint8Array;
}

/**
 * {@link encodePointwise} in steps. At once: the candidates checked and
 * the one with the smallest estimate coded (see {@link smallest}); the
 * others too unless its stream is dense, in which case a tile trial
 * weighs the first ({@link PointwiseSearch.trialBytes}) and best() codes
 * them. best(): the payload's rank and its bytes so far,
 * known before the blend and the residual coders are tried on it (which
 * leave the rank as it is), so that a caller with a smaller payload in
 * hand need not finish it. Where the exact payload may still win (see
 * EXACT_GATE), which sets the rank, the payload is finished at once.
 */
export function pointwiseSearch(t: PreparedTile, e: number): PointwiseSearch {
  if (!t.finite) return finished(exactPayload(t), Infinity);
  if (t.valid === 0) return finished(orExact(t, lowRankPayload(t, null, null)), Infinity);
  const rank0 = rankZero(t, e);
  const coding = smallest(t, e > 0 ? searchRanks(t, e, rank0) : rank0);
  const zeroEstimate = rank0[0].estimate;
  let payload: Uint8Array | null = null;
  const finish = () => {
    if (payload === null) {
      const best = coding.rest();
      const blended = best.withBlend();
      const pick = blended.payload.length < best.payload.length ? blended : best;
      payload = orExact(t, withResidualCoder(t, pick.payload, pick.codes));
    }
    return payload;
  };
  let settled: { rank: number; bytes: number } | null = null;
  const best = () => {
    if (settled === null) {
      const b = coding.rest().payload;
      const p = mayGoExact(t, b) ? finish() : b;
      settled = { rank: payloadHead(p).rank, bytes: p.length };
    }
    return settled;
  };
  // Where the first may go exact, so may the smallest: settled now. Else the smallest, no longer than the first, does not either.
  const first = coding.first.payload;
  return { trialBytes: coding.dense && !mayGoExact(t, first) ? first.length : best().bytes, zeroEstimate, best, finish };
}

/** Whether a candidate's payload is large enough that the tile's exact payload may be smaller once it is finished (see EXACT_GATE). */
function mayGoExact(t: PreparedTile, payload: Uint8Array): boolean {
  // The residual coder may lengthen the payload by a hundredth of its stream and a byte (SYMBOLS_MARGIN, its length's varint).
  return !(SYMBOLS_MARGIN * payload.length + 1 < EXACT_GATE * rawBytes(t));
}

/** A search whose payload is finished. */
function finished(payload: Uint8Array, zeroEstimate: number): PointwiseSearch {
  const settled = { rank: payloadHead(payload).rank, bytes: payload.length };
  return { trialBytes: payload.length, zeroEstimate, best: () => settled, finish: () => payload };
}

/**
 * Ranks the search always tries (where the tile has them) before it may
 * stop. On a large smooth tile ranks 1 and 2 can each cost more than rank 0
 * while rank 3 takes a tenth of it: a 512 x 512 tile of bench/'s large
 * field at rel:1e-3 took 9885 bytes at rank 0, 11743 at 1, 12146 at 2 and
 * 1228 at 3.
 */
const MIN_RANKS_TRIED = 4;

/**
 * The rank search stops once the estimated size has not fallen this many
 * candidates running. On the demo's basin field (512 x 768, land as fill,
 * rel:1e-3) sizes fall, rise and fall again as the rank grows: stopping
 * after 2 gave 54592 bytes, after 3 47956, after 4 40397, and never
 * stopping 36787 (scratch measurement, issue 10; with 2 before the
 * estimates, 47533).
 */
const PATIENCE = 4;

/**
 * Candidates of the rank search coded for real: those with the smallest
 * {@link estimateBytes}. On 141 tiles of bench/'s large, smooth-bumps,
 * smooth-front (256 x 256 tiles), turbulence, annual-precip, volcano and
 * basin-stack (64 x 64) at rel:1e-2 to 1e-4, every candidate logged
 * (scratch measurement, issue 10): the smallest payload of the best 3 by
 * estimate was the smallest of all on 140 tiles and 13 bytes in 191240
 * more over all; the best 2, 30 bytes more; the best 1, 170.
 */
const CODED_RANKS = 3;

/**
 * A rough size in bytes of a candidate's payload, to rank the candidates
 * of one tile: a bit for each bit of the residual's and the factor codes'
 * magnitudes (their rough bits; the factor codes as they are or
 * differenced, whichever has fewer) and for each non-zero code (its sign),
 * and each exception's raw bytes (its cell index and value).
 */
function estimateBytes(t: PreparedTile, f: Factors | null, corr: Correction): number {
  let bits = corr.bits ?? 0;
  if (corr.q !== null) bits += corr.nonzero ?? nonZeros(corr.q);
  if (f) {
    const u = factorBits(f.qu, t.m);
    const w = factorBits(f.qw, t.n);
    bits += Math.min(u.plain + w.plain, u.delta + w.delta) + u.nonzero + w.nonzero;
  }
  return bits / 8 + corr.exceptions.length * (4 + (t.dtype === 'f32' ? 4 : 8));
}

function nonZeros(v: Int32Array): number {
  let k = 0;
  for (let i = 0; i < v.length; i++) if (v[i] !== 0) k++;
  return k;
}

/** Rough bits of factor codes (vectors of `len` codes) as they are and differenced along each vector, and the non-zero count, in one pass. */
function factorBits(v: Int32Array, len: number): { plain: number; delta: number; nonzero: number } {
  // Sums of 32 per code less the leading zeros.
  let plain = 0;
  let delta = 0;
  let zero = 0;
  for (let at = 0; at < v.length; at += len) {
    let prev = 0;
    for (let i = at; i < at + len; i++) {
      const x = v[i];
      const d = x - prev;
      prev = x;
      if (x === 0) zero++;
      plain += Math.clz32(x < 0 ? -x : x);
      delta += Math.clz32(d < 0 ? -d : d);
    }
  }
  return { plain: 32 * v.length - plain, delta: 32 * v.length - delta, nonzero: v.length - zero };
}

/**
 * The candidates to code for real: the rank-0 ones (`rank0`, see
 * rankZero), then ranks 1, 2, ... tried until the estimated size
 * ({@link estimateBytes}) has not fallen PATIENCE times running (after rank
 * MIN_RANKS_TRIED); of all these, the CODED_RANKS with the smallest
 * estimates, in the order tried (the first on a tie).
 */
function searchRanks(t: PreparedTile, e: number, rank0: Checked[]): Checked[] {
  let s = ensureSvd(t, PARTIAL_RANK);
  const tol = s.s[0] * 1e-13;
  const numericalRank = () => {
    let k = 0;
    while (k < s.k && s.s[k] > tol) k++;
    return k;
  };
  let numRank = numericalRank();
  let worse = 0;
  let prev = Math.min(...rank0.map((c) => c.estimate));
  // The best CODED_RANKS so far by estimate, ascending (the one tried first on a tie), with the order tried.
  const kept: (Checked & { order: number })[] = [];
  // The grids of candidates that are not kept go to the next candidates' codes: nothing else holds
  // them (of the rank-0 ones, the caller reads the estimate only).
  const keep = (c: Checked, order: number) => {
    let at = kept.length;
    while (at > 0 && kept[at - 1].estimate > c.estimate) at--;
    if (at >= CODED_RANKS) {
      giveBack(c.corr);
      return;
    }
    kept.splice(at, 0, { ...c, order });
    if (kept.length > CODED_RANKS) giveBack(kept.pop()!.corr);
  };
  rank0.forEach(keep);
  for (const r of RANKS) {
    if (r === 0) continue;
    if (r > s.k && numRank === s.k) {
      s = ensureSvd(t, r);
      numRank = numericalRank();
    }
    if (r > numRank) break;
    const f = pointwiseFactors(t, r, e);
    if (!f) break;
    const c = checked(t, f, e, undefined, undefined, searchGrids);
    keep(c, rank0.length + r);
    worse = c.estimate >= prev ? worse + 1 : 0;
    prev = c.estimate;
    if (worse >= PATIENCE && r >= MIN_RANKS_TRIED) break;
  }
  return kept.sort((a, b) => a.order - b.order);
}

/**
 * Where a tile's first candidate (smallest estimate) codes in at least this
 * many bits a valid cell, a tile trial weighs the tile by that candidate
 * alone (see PointwiseSearch.trialBytes), and the others are coded only
 * for the tiles it keeps: there they take long to code (dense streams, a
 * few per cent apart, so that the early stop comes late). Sparser streams
 * are coded fast, and there the estimates rank the candidates worst. The
 * rank searches that packs of bench/'s fields ran at rel:1e-2, 1e-3 and
 * 1e-4 (the large field aside; 187 tiles, trials and encoding passes;
 * scratch measurement): of 83 tiles at or above this, the first candidate
 * was the smallest on 62, and 0.8% to 3.9% longer than it on 21 (all of
 * turbulence-stack, whose ranks 0 to 3 were within 4.2% by estimate); of
 * 104 below, 1.05 to 6.4 times as long on 14 of smooth-front's.
 */
const DENSE_BITS = 1;

/**
 * Most cells of a tile whose other candidates may wait (see DENSE_BITS):
 * until they are coded, each holds its codes (4 bytes a cell), and a trial
 * holds up to 8 such tiles per candidate shape. On a dense 256 x 32768
 * field at rel:1e-3 (smooth waves and seeded noise; its trial tried eight
 * 256 x 4096 tiles first) the peak resident set of a pack was 372 to 418
 * MB in three runs with no limit, 305 to 351 MB with this one, and 305 to
 * 357 MB before any wait (scratch measurement, /usr/bin/time -v); a
 * trial's tiles of at most this many cells hold at most 16 MiB more.
 */
const WAITING_CELLS = 1 << 18;

/**
 * The smallest of the candidates coded for real; the first on a tie. They
 * are coded in ascending order of estimate, so that a short payload comes
 * early: a later one stops coding its residual once that stream is longer
 * than the shortest payload so far less 4 bytes (a payload holds its
 * stream, the stream's length and at least 3 bytes more: method, flags,
 * rank), as it would then be longer. The first is coded at once
 * (`first`), the others by rest() (once; it gives the smallest), at once
 * too unless the first's stream is dense (`dense`, see {@link DENSE_BITS})
 * and the tile at most {@link WAITING_CELLS} cells.
 */
function smallest(t: PreparedTile, checkedOnes: Checked[]): { first: Candidate; rest(): Candidate; dense: boolean } {
  // The differences of a candidate to be coded, formed when it is (the others' were never formed).
  const candidates = checkedOnes.slice();
  const form = (k: number) => (candidates[k] = { ...candidates[k], corr: formed(t, candidates[k].corr) });
  const order = candidates.map((_c, k) => k).sort((a, b) => candidates[a].estimate - candidates[b].estimate || a - b);
  let best = codedCandidate(t, form(order[0]))!;
  let bestAt = order[0];
  let done = false;
  const rest = () => {
    if (done) return best;
    done = true;
    for (const k of order.slice(1)) {
      const coded = codedCandidate(t, form(k), best.payload.length - 4);
      if (coded === null) continue;
      if (coded.payload.length < best.payload.length || (coded.payload.length === best.payload.length && k < bestAt)) {
        best = coded;
        bestAt = k;
      }
    }
    // The others' grids are no one's now (a coded candidate's payload holds bytes, not its grids).
    const kept = candidates[bestAt].corr;
    candidates.forEach((c, k) => {
      if (k !== bestAt) giveBack(c.corr, kept);
    });
    return best;
  };
  const first = best;
  const dense = 8 * first.payload.length >= DENSE_BITS * t.valid && t.m * t.n <= WAITING_CELLS;
  if (!dense) rest();
  return { first, rest, dense };
}

