/**
 * The viewer's block cache: decoded blocks of planes (see plane.ts), kept at
 * a sampling step (every k-th row and column, see {@link stepOf}) and a
 * quality (coarse: decoded from payload prefixes; full: as stored), read
 * through the public decoding API only (`Archive.read` of windows).
 * Browser-safe.
 *
 * A read fetches only the tiles its window touches; blocks are read in runs
 * of neighbours along a row of blocks, one read each, several at once. Where
 * the archive records progressive prefixes (spec/FORMAT.md, section 18), the
 * first read of a block asks for the loose bound {@link COARSE_BOUND}, so
 * each tile is fetched only as far as a prefix that meets it, and the block
 * is read again whole afterwards; a read that found no prefixes to use
 * already holds the stored values and is kept as full.
 */
import type { Archive } from '../archive.js';
import type { FieldHeader } from '../format/schema.js';
import type { FloatArray } from '../types.js';
import { readWindow, type PlaneLayout } from './plane.js';

/**
 * The bound of the first, coarse read of a progressive archive: an RMSE per
 * tile of at most 1/31.6 of the field's value range (PSNR 30 dB), so that
 * tiles whose first ranks already draw them closely come from a prefix.
 */
export const COARSE_BOUND = 'psnr:30';

/** Window reads in flight at once (each may fetch several ranges in one request). */
export const RUNS_IN_FLIGHT = 4;

/** Most cells the cache keeps (about 64 MB of float64); the least recently drawn blocks go first. */
export const CACHE_CELLS = 8 << 20;

/** A decoded block at a sampling step. */
export interface Block {
  /** Plane rows and columns of the first kept cell (multiples of step). */
  r0: number;
  c0: number;
  /** Kept rows and columns. */
  rows: number;
  cols: number;
  step: number;
  coarse: boolean;
  values: FloatArray;
}

/** The value of plane cell (r, c) held by a block (r, c multiples of its step, within it). */
export function blockValue(b: Block, r: number, c: number): number {
  return b.values[((r - b.r0) / b.step) * b.cols + (c - b.c0) / b.step];
}

/** What the loads of a field did: window reads, those that took tiles from prefixes, and those tiles. */
export interface LoadTally {
  reads: number;
  coarseReads: number;
  prefixTiles: number;
}

/** Blocks of one field of an opened archive. */
export class BlockStore {
  private readonly cache = new Map<string, Block>();
  private readonly pending = new Map<string, Promise<void>>();
  private cells = 0;
  private running = 0;
  private readonly queue: (() => void)[] = [];
  /** False once a coarse read found no prefix to use: the archive records none (or none that help). */
  private progressive = true;
  readonly tally: LoadTally = { reads: 0, coarseReads: 0, prefixTiles: 0 };

  constructor(
    private readonly archive: Archive,
    readonly h: FieldHeader,
    readonly L: PlaneLayout,
  ) {}

  private key(p: number, bi: number, bj: number, step: number, coarse: boolean): string {
    return `${p}/${bi}/${bj}/${step}/${coarse ? 'c' : 'f'}`;
  }

  private lookup(key: string): Block | undefined {
    const b = this.cache.get(key);
    if (b !== undefined) {
      // Map order is the recency order: move it to the end.
      this.cache.delete(key);
      this.cache.set(key, b);
    }
    return b;
  }

  /** The best block held for (p, bi, bj) at step k: whole before coarse, the finest step first. */
  get(p: number, bi: number, bj: number, k: number): Block | undefined {
    for (const coarse of [false, true]) {
      const b = this.lookup(this.key(p, bi, bj, 1, coarse)) ?? (k > 1 ? this.lookup(this.key(p, bi, bj, k, coarse)) : undefined);
      if (b !== undefined) return b;
    }
    return undefined;
  }

  /** True when (p, bi, bj) is held at full quality for step k. */
  private full(p: number, bi: number, bj: number, k: number): boolean {
    return this.cache.has(this.key(p, bi, bj, 1, false)) || this.cache.has(this.key(p, bi, bj, k, false));
  }

  private hasCoarse(p: number, bi: number, bj: number, k: number): boolean {
    return this.full(p, bi, bj, k) || this.cache.has(this.key(p, bi, bj, 1, true)) || this.cache.has(this.key(p, bi, bj, k, true));
  }

  private put(key: string, b: Block): void {
    const old = this.cache.get(key);
    if (old !== undefined) this.cells -= old.values.length;
    this.cache.set(key, b);
    this.cells += b.values.length;
    for (const [k, v] of this.cache) {
      if (this.cells <= CACHE_CELLS || k === key) break;
      this.cache.delete(k);
      this.cells -= v.values.length;
    }
  }

  /**
   * Make blocks `want` (pairs [bi, bj]) of plane `p` available at step `k`:
   * coarse first where the archive allows, then whole. `drawn` is called
   * after each read lands; `current` says whether the view still wants
   * these blocks (a view that moved on skips the whole pass).
   */
  async load(p: number, want: readonly [number, number][], k: number, drawn: () => void, current: () => boolean): Promise<void> {
    if (this.progressive) {
      await this.readPass(p, want, k, true, drawn, current);
      if (!current()) return;
    }
    await this.readPass(p, want, k, false, drawn, current);
  }

  /** True when (p, bi, bj) is held as a pass of this quality needs it at step k. */
  private held(p: number, bi: number, bj: number, k: number, coarse: boolean): boolean {
    return coarse ? this.hasCoarse(p, bi, bj, k) : this.full(p, bi, bj, k);
  }

  /**
   * Read those of `blocks` not yet held, in runs along each row of blocks,
   * at most {@link RUNS_IN_FLIGHT} at once; blocks another pass is reading
   * are waited for. A run still queued when the view has moved on is not
   * read; a pass that waited for it reads what is still missing itself.
   */
  async readPass(p: number, blocks: readonly [number, number][], k: number, coarse: boolean, drawn: () => void, current: () => boolean): Promise<void> {
    for (let round = 0; round < 3 && current(); round++) {
      const missing = blocks.filter(([bi, bj]) => !this.held(p, bi, bj, k, coarse));
      if (missing.length === 0) return;
      const waits: Promise<void>[] = [];
      const fresh: [number, number][] = [];
      for (const [bi, bj] of missing) {
        const w = this.pending.get(this.key(p, bi, bj, k, coarse)) ?? this.pending.get(this.key(p, bi, bj, k, false));
        if (w !== undefined) waits.push(w);
        else fresh.push([bi, bj]);
      }
      fresh.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
      for (let i = 0; i < fresh.length; ) {
        let j = i + 1;
        while (j < fresh.length && fresh[j][0] === fresh[i][0] && fresh[j][1] === fresh[j - 1][1] + 1) j++;
        const run = fresh.slice(i, j);
        const job = this.slot(async () => {
          if (!current()) return;
          await this.readRun(p, run[0][0], run[0][1], run[run.length - 1][1] + 1, k, coarse);
          drawn();
        });
        for (const [bi, bj] of run) this.pending.set(this.key(p, bi, bj, k, coarse), job);
        const clear = () => run.forEach(([bi, bj]) => this.pending.get(this.key(p, bi, bj, k, coarse)) === job && this.pending.delete(this.key(p, bi, bj, k, coarse)));
        job.then(clear, clear);
        waits.push(job);
        i = j;
      }
      await Promise.all(waits);
    }
  }

  /** Run `task` when fewer than {@link RUNS_IN_FLIGHT} tasks are running. */
  private async slot(task: () => Promise<void>): Promise<void> {
    while (this.running >= RUNS_IN_FLIGHT) await new Promise<void>((resolve) => this.queue.push(resolve));
    this.running++;
    try {
      await task();
    } finally {
      this.running--;
      this.queue.shift()?.();
    }
  }

  /** Read blocks [bj0, bj1) of block row bi of plane p in one window, and keep each at step k. */
  private async readRun(p: number, bi: number, bj0: number, bj1: number, k: number, coarse: boolean): Promise<void> {
    const { L, h } = this;
    const r0 = bi * L.blockRows;
    const r1 = Math.min(L.rows, r0 + L.blockRows);
    const c0 = bj0 * L.blockCols;
    const c1 = Math.min(L.cols, bj1 * L.blockCols);
    const got = await this.archive.read(h.name, { ...readWindow(h, L, p, r0, r1, c0, c1), ...(coarse ? { bound: COARSE_BOUND } : {}) });
    // For a snapshot plane the read holds whole plane rows; otherwise exactly the window.
    const width = L.what === 'snapshot' ? L.cols : c1 - c0;
    const left = L.what === 'snapshot' ? 0 : c0;
    const asCoarse = coarse && got.prefixTiles > 0;
    this.tally.reads++;
    if (asCoarse) this.tally.coarseReads++;
    this.tally.prefixTiles += got.prefixTiles;
    if (coarse && got.prefixTiles === 0) this.progressive = false;
    const first = (a: number) => Math.ceil(a / k) * k;
    for (let bj = bj0; bj < bj1; bj++) {
      const b0 = bj * L.blockCols;
      const b1 = Math.min(L.cols, b0 + L.blockCols);
      const fr = first(r0);
      const fc = first(b0);
      const rows = Math.max(0, Math.ceil((r1 - fr) / k));
      const cols = Math.max(0, Math.ceil((b1 - fc) / k));
      const values = got.values instanceof Float32Array ? new Float32Array(rows * cols) : new Float64Array(rows * cols);
      for (let i = 0; i < rows; i++) {
        const src = (fr + i * k - r0) * width + (fc - left);
        for (let j = 0; j < cols; j++) values[i * cols + j] = got.values[src + j * k];
      }
      this.put(this.key(p, bi, bj, k, asCoarse), { r0: fr, c0: fc, rows, cols, step: k, coarse: asCoarse, values });
    }
  }
}
