/**
 * rankfield as one more method of the table, through its public API only
 * (pack, open, read), plus a split of its bytes into factors, residual and
 * metadata read from the tile payloads (spec/FORMAT.md, "Tile payloads").
 */
import { open, pack } from '../src/index.js';
import { payloadShares } from '../src/codec/payload.js';
import type { Codec } from './baselines/codec.js';
import type { BenchField } from './fields.js';

/** Tile side of the fixed-tile row. */
export const TILE = 64;

/** rankfield with its defaults: the tile shape chosen by trial on a sample (`tile: 'auto'`). */
export const rankfield: Codec = {
  id: 'rankfield',
  describe: "this library with its defaults: pack(values, shape, { bound, fill }), read back with open(bytes).read(); the tile shape is chosen by trial (64, 128, 256, 512 on fields of at least 1024 x 1024, 1024 on fields of at least 2048 x 2048 when 512 did best, each tried on eight tiles spread over the field; fields of at most 2^18 cells try the whole field first, then smaller squares, and stop at the first that does worse).",
  encode: (field, target) => pack(field.values, [field.rows, field.cols], { bound: target.text, fill: field.fill }),
  async decode(bytes) {
    const archive = await open(bytes);
    const { values } = await archive.read();
    if (!(values instanceof Float32Array)) throw new Error('rankfield returned float64 for a float32 field');
    return values;
  },
};

/** rankfield with fixed 64 x 64 tiles: the cheapest window reads. */
export const rankfield64: Codec = {
  ...rankfield,
  id: 'rankfield-64',
  describe: `this library with fixed tiles: pack(values, shape, { bound, tile: ${TILE}, fill }), the layout with the cheapest window reads.`,
  encode: (field, target) => pack(field.values, [field.rows, field.cols], { bound: target.text, tile: TILE, fill: field.fill }),
};

/** Where rankfield's bytes go. */
export interface Breakdown {
  tiles: number;
  meanRank: number;
  /** Tiles stored with the exact (lossless) method. */
  exactTiles: number;
  /** Factor values stored, sum of rank x (rows + cols) over tiles: comparable with the Eckart-Young floor's count. */
  factorValues: number;
  /** Bytes of the quantized factors (the factor groups: step codes, lengths and coded streams). */
  factors: number;
  /** Bytes of the residual and exception streams, and of exact tiles. */
  residual: number;
  /** Everything else: payload fixed parts, mask sections, section headers, container header, index and tail. */
  metadata: number;
  /**
   * The per-tile part of the metadata, as the compression target counts it
   * (tile headers, index, mask sections): the index pages, and every
   * payload byte that is not coded data (fixed part, mask section, group
   * list, step codes, stream lengths, the residual's step and predictor,
   * section headers).
   */
  tileMetadata: number;
  /** The archive's frame: prologue, header block, index directory and tail (once per archive, whatever its size). */
  container: number;
  total: number;
}

/** Split one tile payload; returns [factors, residual] bytes (the rest is metadata). */
export function splitPayload(p: Uint8Array): [number, number] {
  const shares = payloadShares(p);
  if (shares === null) throw new Error(`a payload of ${p.length} bytes that does not walk to its end`);
  return [shares.factors, shares.residual + shares.exceptions];
}

export async function breakdown(bytes: Uint8Array): Promise<Breakdown> {
  const archive = await open(bytes);
  const ix = (await archive.loadIndex()).fields[0];
  let factors = 0;
  let residual = 0;
  let framing = 0;
  let exactTiles = 0;
  for (let t = 0; t < ix.offset.length; t++) {
    const p = bytes.subarray(ix.offset[t], ix.offset[t] + ix.length[t]);
    if (p[0] === 0) exactTiles++;
    const [f, r] = splitPayload(p);
    factors += f;
    residual += r;
    framing += payloadShares(p)!.framing;
  }
  // The frame: 12-byte prologue, header and directory (lengths from the tail), 24-byte tail (spec/FORMAT.md, section 3).
  const tail = new DataView(bytes.buffer, bytes.byteOffset + bytes.length - 24, 24);
  const container = 12 + tail.getUint32(0, true) + tail.getUint32(4, true) + 24;
  const tiles = ix.rank.length;
  const h = archive.header.fields[0];
  const gc = Math.ceil(h.shape[1] / h.tile[1]);
  let factorValues = 0;
  for (let t = 0; t < tiles; t++) {
    const m = Math.min(h.tile[0], h.shape[0] - Math.floor(t / gc) * h.tile[0]);
    const n = Math.min(h.tile[1], h.shape[1] - (t % gc) * h.tile[1]);
    factorValues += ix.rank[t] * (m + n);
  }
  const meanRank = tiles > 0 ? ix.rank.reduce((a, b) => a + b, 0) / tiles : 0;
  const metadata = bytes.length - factors - residual;
  return { tiles, meanRank, exactTiles, factorValues, factors, residual, metadata, tileMetadata: metadata - container + framing, container, total: bytes.length };
}

/** A tiling tried besides the chosen one, for the metadata target: its tile, bytes and per-tile metadata share. */
export interface Tiling {
  tile: [number, number];
  bytes: number;
  /** Per-tile metadata over total bytes (see {@link Breakdown.tileMetadata}). */
  share: number;
}

/**
 * Where an archive's per-tile metadata passes `limit` of its bytes: the
 * chosen tile and the coarser ones (each side doubled, then both, within
 * the field), packed with the same options, so a reader sees what a
 * smaller share of metadata would cost in bytes. Empty when the share is
 * within the limit.
 */
export async function coarserTilings(field: BenchField, bound: string, bytes: Uint8Array, limit: number): Promise<Tiling[]> {
  const b = await breakdown(bytes);
  if (b.tileMetadata <= limit * b.total) return [];
  const [tr, tc] = (await open(bytes)).header.fields[0].tile;
  const out: Tiling[] = [{ tile: [tr, tc], bytes: b.total, share: b.tileMetadata / b.total }];
  const seen = new Set([`${tr}x${tc}`]);
  for (const [r, c] of [[2 * tr, tc], [tr, 2 * tc], [2 * tr, 2 * tc]]) {
    const tile: [number, number] = [Math.min(r, field.rows), Math.min(c, field.cols)];
    if (seen.has(`${tile[0]}x${tile[1]}`)) continue;
    seen.add(`${tile[0]}x${tile[1]}`);
    const other = pack(field.values, [field.rows, field.cols], { bound, fill: field.fill, tile });
    const ob = await breakdown(other);
    out.push({ tile, bytes: ob.total, share: ob.tileMetadata / ob.total });
  }
  return out;
}
