/**
 * The factor rows of a field layer held for one read (spec/FORMAT.md,
 * 6.2.2 "Field layer"): for the tiles a read decodes next, the left factor
 * rows of their rows and the right factor rows of their columns, fetched
 * as windows of the two factor fields, checked finite, and turned into each
 * tile's term by layer.ts. Rows the next tiles do not need are dropped, so
 * a read holds the factor rows of about one batch of tiles, never the
 * whole factors of a large field.
 */
import { layerTerm } from './codec/layer.js';
import { FormatCode, FormatError } from './errors.js';
import { type FieldHeader, type FieldLayerRef, quoteName } from './format/schema.js';
import { tileOrigin, tileShape } from './geometry.js';

/** Reads rows [r0, r1) of a factor field, all its columns (the factor field at `position` of the header's list). */
export type FactorWindow = (position: number, r0: number, r1: number) => Promise<Float64Array>;

/** Factor windows read at once (each a read of its own, with merged fetches): as many as a browser sends to one host (common practice, no source). */
const WINDOWS_AT_ONCE = 6;

/** A run of factor rows held: rows [row0, row0 + values.length / rank). */
interface Run {
  row0: number;
  rows: number;
  values: Float64Array;
}

/** Half-open intervals sorted and merged where they touch or overlap. */
function merged(spans: [number, number][]): [number, number][] {
  spans.sort((a, b) => a[0] - b[0]);
  const out: [number, number][] = [];
  for (const [a, b] of spans) {
    const last = out[out.length - 1];
    if (last !== undefined && a <= last[1]) last[1] = Math.max(last[1], b);
    else out.push([a, b]);
  }
  return out;
}

/** The held run covering rows [a, b), if any. */
function covering(runs: readonly Run[], a: number, b: number): Run | undefined {
  return runs.find((r) => r.row0 <= a && b <= r.row0 + r.rows);
}

/** One side of the layer: the factor field it is read from, and the runs of rows held. */
class Side {
  runs: Run[] = [];
  constructor(
    readonly name: 'left' | 'right',
    readonly position: number,
    readonly field: string,
  ) {}
}

/** The factor rows of one layered field for one read; see the module comment. */
export class LayerRows {
  private readonly left: Side;
  private readonly right: Side;
  private readonly rank: number;
  private out = new Float64Array(0);

  constructor(
    private readonly h: FieldHeader,
    layer: FieldLayerRef,
    fields: readonly FieldHeader[],
    private readonly window: FactorWindow,
    private readonly label: string,
  ) {
    this.rank = layer.rank;
    this.left = new Side('left', layer.left, fields[layer.left].name);
    this.right = new Side('right', layer.right, fields[layer.right].name);
  }

  /** The rows of the stacked field (left factor) and the columns (right factor) tile t covers. */
  private spans(t: number): { rows: [number, number]; cols: [number, number] } {
    const { s, i0, j0 } = tileOrigin(this.h, t);
    const [m, n] = tileShape(this.h, t);
    const a = s * this.h.shape[0] + i0;
    return { rows: [a, a + m], cols: [j0, j0 + n] };
  }

  /**
   * Hold the factor rows `tiles` need (and only those): rows already held
   * are kept, the others fetched, one window of each factor field per run
   * of touching rows.
   */
  async load(tiles: readonly number[]): Promise<void> {
    const rows: [number, number][] = [];
    const cols: [number, number][] = [];
    for (const t of tiles) {
      const sp = this.spans(t);
      rows.push(sp.rows);
      cols.push(sp.cols);
    }
    await Promise.all([this.hold(this.left, merged(rows)), this.hold(this.right, merged(cols))]);
  }

  private async hold(side: Side, spans: [number, number][]): Promise<void> {
    const next: Run[] = [];
    const missing: [number, number][] = [];
    for (const [a, b] of spans) {
      const kept = covering(side.runs, a, b);
      if (kept) next.push(kept);
      else missing.push([a, b]);
    }
    // A window across many slices needs one run of rows per slice: a few windows are read at once.
    for (let k = 0; k < missing.length; k += WINDOWS_AT_ONCE) {
      next.push(...(await Promise.all(missing.slice(k, k + WINDOWS_AT_ONCE).map(([a, b]) => this.run(side, a, b)))));
    }
    side.runs = next;
  }

  /** Rows [a, b) of one factor, read and checked. */
  private async run(side: Side, a: number, b: number): Promise<Run> {
    const values = await this.window(side.position, a, b).catch((e: unknown) => {
      if (!(e instanceof FormatError)) throw e;
      // The factor field's own refusal, said as a refusal of this field's read (same code).
      const inner = e.message.startsWith(`${this.label} `) ? e.message.slice(this.label.length + 1) : e.message;
      throw new FormatError(e.code, `${this.label} field ${quoteName(this.h.name)}: reading rows ${a} to ${b - 1} of its layer's ${side.name} factor: ${inner}`);
    });
    this.checkFinite(side, values, a);
    return { row0: a, rows: b - a, values };
  }

  /** A factor value that is not finite is refused (spec/FORMAT.md 6.2.2): the factor fields have no missing cells. */
  private checkFinite(side: Side, values: Float64Array, row0: number): void {
    for (let c = 0; c < values.length; c++) {
      const v = values[c];
      if (v - v !== 0) {
        const at = `row ${row0 + Math.floor(c / this.rank)}, column ${c % this.rank}`;
        throw new FormatError(FormatCode.Malformed, `${this.label} field ${quoteName(this.h.name)}: layer ${side.name} factor (field ${quoteName(side.field)}) holds ${v} at ${at}, not a finite value`);
      }
    }
  }

  /**
   * The layer's term for tile t (m x n), whose factor rows {@link load}
   * must hold. The array is reused by the next call: use it before then.
   */
  term(t: number): Float64Array {
    const { rows, cols } = this.spans(t);
    const l = covering(this.left.runs, rows[0], rows[1]);
    const r = covering(this.right.runs, cols[0], cols[1]);
    // Internal assertion: every read loads the tiles it decodes first.
    if (l === undefined || r === undefined) throw new Error(`layer factor rows of tile ${t} of field ${quoteName(this.h.name)} were not loaded`);
    const m = rows[1] - rows[0];
    const n = cols[1] - cols[0];
    if (this.out.length < m * n) this.out = new Float64Array(m * n);
    return layerTerm(this.rank, l.values, l.row0, r.values, r.row0, rows[0], cols[0], m, n, this.out.subarray(0, m * n));
  }
}
