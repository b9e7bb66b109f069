/**
 * The store of the L2 planner's first pass: every tile's squared singular
 * values, in flat typed arrays (see src/codec/plan-l2.ts).
 */

/** Values per chunk of a {@link Spectra} store at most (8 MiB): the store grows a chunk at a time, never by copying. */
const SPECTRA_CHUNK = 1 << 20;

/**
 * What the planner keeps of the first pass: per tile its rows, columns,
 * valid cells and squared singular values, in flat typed arrays, and no
 * tile data. The Eckart-Young cut is field-wide (the smallest values of all
 * tiles go first), so every value that a cut could reach is needed, at 8
 * bytes each: at most min(m, n) per tile, 1/32 of a float32 field's bytes
 * at 64 x 64 tiles. A tile may be added with only its smallest values (see
 * `cuttable` in first-pass.ts); `full` keeps its whole count, the rank no cut has
 * touched. Tiles are added in tile order, each as soon as its first pass is
 * done.
 */
export class Spectra {
  /** Rows, columns and valid cells per tile. */
  readonly m: Int32Array;
  readonly n: Int32Array;
  readonly valid: Int32Array;
  /** Where tile t's values lie: the chunk, the offset within it, and how many. */
  private readonly chunk: Int32Array;
  private readonly offset: Int32Array;
  /** Values held of tile t: its smallest `length[t]` of `full[t]`. */
  readonly length: Int32Array;
  readonly full: Int32Array;
  private readonly chunks: Float64Array[] = [];
  private used = 0;
  /** Tiles added so far. */
  count = 0;

  constructor(readonly tiles: number) {
    this.m = new Int32Array(tiles);
    this.n = new Int32Array(tiles);
    this.valid = new Int32Array(tiles);
    this.chunk = new Int32Array(tiles);
    this.offset = new Int32Array(tiles);
    this.length = new Int32Array(tiles);
    this.full = new Int32Array(tiles);
  }

  /**
   * Add the next tile's first-pass result (its spectrum is copied; the
   * result is not kept). `full`: the length of the whole spectrum when
   * `sv2` holds only its smallest values.
   */
  add(f: { sv2: Float64Array; dims: [number, number, number] }, full = f.sv2.length): void {
    const t = this.count;
    // Internal assertion: the callers add exactly the field's tiles.
    if (t >= this.tiles) throw new Error(`more than the ${this.tiles} tiles of the field were planned`);
    const k = f.sv2.length;
    // A spectrum never straddles two chunks (tile sides are at most 4096, well below a chunk). A chunk holds
    // SPECTRA_CHUNK values, or as many as the tiles still to come take if each is as long as this one: a small
    // field's store is then its size, not 8 MiB (made and zeroed for each first pass: 10% of a pack of
    // vega-datasets' volcano at psnr:60, whose tile trial plans two small fields, in a profile).
    if (this.chunks.length === 0 || this.used + k > this.chunks[this.chunks.length - 1].length) {
      this.chunks.push(new Float64Array(Math.max(k, Math.min(SPECTRA_CHUNK, (this.tiles - t) * k))));
      this.used = 0;
    }
    this.chunks[this.chunks.length - 1].set(f.sv2, this.used);
    this.chunk[t] = this.chunks.length - 1;
    this.offset[t] = this.used;
    this.length[t] = k;
    this.full[t] = full;
    this.used += k;
    [this.m[t], this.n[t], this.valid[t]] = f.dims;
    this.count++;
  }

  /** Tile t's squared singular values, descending (a view, not a copy). */
  values(t: number): Float64Array {
    return this.chunks[this.chunk[t]].subarray(this.offset[t], this.offset[t] + this.length[t]);
  }

  /** Bytes held: the per-tile arrays and the chunks of values. */
  get bytes(): number {
    let b = 7 * 4 * this.tiles;
    for (const c of this.chunks) b += c.byteLength;
    return b;
  }
}

