/**
 * What an archive's bytes and tiles are made of, in words a user can act on:
 * how many tiles use a low-rank part and of what mean rank, and which share
 * of the bytes is factors, residual, exactly stored values and bookkeeping.
 * Used by `show`, `pack` and `trial`.
 */
import { payloadShares } from '../codec/payload.js';
import { FormatCode, FormatError, Method, type ByteSource, type FieldIndex } from '../index.js';
import { readRanges } from '../io/source.js';

/** How the tiles of a field are stored. */
export interface TileUse {
  tiles: number;
  /** Tiles with a low-rank part (rank 1 or more). */
  lowRank: number;
  /** Mean rank of those tiles (0 when there are none). */
  meanRank: number;
  /** Tiles of rank 0: the centre and a coded residual only. */
  residualOnly: number;
  /** Tiles whose values are stored exactly. */
  exact: number;
}

/** Bytes of a field's payloads by role. */
export interface ByteShares {
  /** Quantized low-rank factors (with their step codes). */
  factors: number;
  /** The coded residual. */
  residual: number;
  /** Values stored exactly: exact tiles and exceptions. */
  exact: number;
  /** The rest of the payloads: fixed parts with the centre, masks of missing cells, section framing. */
  tileHeaders: number;
}

/** Tile use from a field's index. */
export function tileUse(ix: Pick<FieldIndex, 'method' | 'rank'>): TileUse {
  let lowRank = 0;
  let rankSum = 0;
  let exact = 0;
  ix.method.forEach((m, t) => {
    if (m === Method.Exact) exact++;
    else if (ix.rank[t] > 0) {
      lowRank++;
      rankSum += ix.rank[t];
    }
  });
  const tiles = ix.method.length;
  return { tiles, lowRank, meanRank: lowRank > 0 ? rankSum / lowRank : 0, residualOnly: tiles - lowRank - exact, exact };
}

/** Payload bytes fetched per batch when shares are counted. */
const BATCH = 16 << 20;

/** Count the bytes of every payload of a field by role, reading the payloads from `source`. */
export async function byteShares(source: ByteSource, ix: Pick<FieldIndex, 'offset' | 'length'>, label: string): Promise<ByteShares> {
  const out: ByteShares = { factors: 0, residual: 0, exact: 0, tileHeaders: 0 };
  for (let t = 0; t < ix.offset.length; ) {
    const batch: number[] = [];
    let bytes = 0;
    while (t < ix.offset.length && (batch.length === 0 || bytes + ix.length[t] <= BATCH)) {
      bytes += ix.length[t];
      batch.push(t++);
    }
    const payloads = await readRanges(source, batch.map((u) => ({ offset: ix.offset[u], length: ix.length[u] })));
    payloads.forEach((p, k) => {
      const s = payloadShares(p);
      if (s === null) throw new FormatError(FormatCode.Malformed, `${label}: tile ${batch[k]}: its payload does not walk to its end (run rankfield check)`);
      out.factors += s.factors;
      out.residual += s.residual;
      out.exact += s.exceptions;
      out.tileHeaders += p.length - s.factors - s.residual - s.exceptions;
    });
  }
  return out;
}

/** "12 of 40 tiles (30%) use a low-rank part, mean rank 2.3; 28 are residual only (rank 0); 0 stored exactly" */
export function tileUseText(u: TileUse): string {
  const pct = (n: number) => `${u.tiles > 0 ? Math.round((100 * n) / u.tiles) : 0}%`;
  const low = u.lowRank > 0 ? `${u.lowRank} of ${u.tiles} tiles (${pct(u.lowRank)}) use a low-rank part, of mean rank ${u.meanRank.toFixed(1)}` : `no low-rank part in any of the ${u.tiles} tile${u.tiles === 1 ? '' : 's'}`;
  const parts = [low];
  if (u.residualOnly > 0) parts.push(`${u.residualOnly} (${pct(u.residualOnly)}) ${u.residualOnly === 1 ? 'is' : 'are'} a mean and a coded residual only (rank 0)`);
  if (u.exact > 0) parts.push(`${u.exact} (${pct(u.exact)}) stored exactly`);
  return parts.join('; ');
}

/** "62% low-rank factors, 30% residual, 1% exact values, 7% tile headers and masks" */
export function sharesText(s: ByteShares): string {
  const total = s.factors + s.residual + s.exact + s.tileHeaders;
  const pct = (n: number) => `${total > 0 ? Math.round((100 * n) / total) : 0}%`;
  return `${pct(s.factors)} low-rank factors, ${pct(s.residual)} residual, ${pct(s.exact)} exactly stored values, ${pct(s.tileHeaders)} tile headers and masks`;
}
