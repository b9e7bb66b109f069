/**
 * The viewer page's script (bundled as rankfield-view.mjs; the decoder comes
 * from rankfield-decode.mjs through the public decoding API). It opens the
 * archive the local server offers at ./archive with HTTP Range requests and
 * draws one plane of a field on a canvas, reading only the blocks the view
 * needs (see blocks.ts), in the colours `preview` uses.
 *
 * Pixel sampling: at `s` pixels per cell, canvas pixel (x, y) shows plane
 * cell (floor(r0 + (y + 0.5) / s), floor(c0 + (x + 0.5) / s)), row and column
 * each rounded down to a multiple of the step k = {@link stepOf}(s); its
 * colour is viridis at (v - lo) / (hi - lo), lo and hi the field's stored
 * value range, and missing cells are grey. The view is kept in the address
 * (#var=..&plane=..&r=..&c=..&s=..), so a reload or a shared link shows it again.
 */
import { formatBound, HttpSource, isPointwise, open, type Archive, type FieldHeader } from '../decode.js';
import { mapColour, MISSING, type Rgb } from '../picture/colormap.js';
import { tickLabel, ticks } from '../picture/scale.js';
import { BlockStore, blockValue, COARSE_BOUND, type Block } from './blocks.js';
import { matrixLead, ndIndex, planeLayout, stepOf, tileOf, type PlaneLayout } from './plane.js';

/** What the server tells the page besides the archive: its name and the coordinate variables it carries, by dimension. */
interface Info {
  label: string;
  coords: Record<string, number[]>;
}

/** Where the view is: plane p, the cell at the canvas's top-left corner, pixels per cell. */
interface View {
  field: string;
  plane: number;
  r0: number;
  c0: number;
  s: number;
}

const OUTSIDE: Rgb = [248, 248, 248];
const UNREAD: Rgb = [222, 222, 222];
const MAX_SCALE = 64;

const $ = <T extends HTMLElement>(id: string) => document.getElementById(id) as T;

/** 'every 2nd', 'every 4th', ...: the sampling step in words. */
function every(k: number): string {
  return `every ${k}${k % 10 === 2 && k % 100 !== 12 ? 'nd' : 'th'} cell`;
}

/** One line of text, or '-' for nothing. */
function show(v: number): string {
  return Number.isFinite(v) ? String(Number(v.toPrecision(7))) : String(v);
}

class Viewer {
  private store!: BlockStore;
  private h!: FieldHeader;
  private L!: PlaneLayout;
  private view!: View;
  private lo = 0;
  private hi = 1;
  private fill: number | null = null;
  private gen = 0;
  private frame = 0;
  /** Where the pointer last was over the canvas, for the readout; null when it is elsewhere. */
  private pointer: [number, number] | null = null;
  private readonly canvas = $<HTMLCanvasElement>('field');
  private readonly ctx = this.canvas.getContext('2d')!;
  private readonly stores = new Map<string, BlockStore>();

  constructor(
    private readonly archive: Archive,
    private readonly source: HttpSource,
    private readonly info: Info,
  ) {}

  start(): void {
    const select = $<HTMLSelectElement>('var');
    const want = new URLSearchParams(location.hash.slice(1));
    // The factor fields of a layer are part of their field: listed only when the address names one.
    const asked = want.get('var') ?? '';
    const listed = this.archive.mainNames;
    const names = this.archive.names.includes(asked) && !listed.includes(asked) ? [...listed, asked] : listed;
    for (const name of names) select.add(new Option(name, name));
    const field = names.includes(asked) ? asked : names[0];
    this.resize();
    this.use(field, Number(want.get('plane') ?? 0));
    const n = (k: string) => (want.has(k) && Number.isFinite(Number(want.get(k))) ? Number(want.get(k)) : null);
    const s = n('s');
    if (s !== null && s > 0) this.view = { ...this.view, r0: n('r') ?? 0, c0: n('c') ?? 0, s: Math.min(MAX_SCALE, s) };
    this.wire();
    this.changed();
  }

  /** Switch to a field (and a plane of it), fitted to the canvas. */
  private use(field: string, plane: number): void {
    const { header: h } = this.archive.field(field);
    this.h = h;
    this.L = planeLayout(h);
    let store = this.stores.get(field);
    if (store === undefined) this.stores.set(field, (store = new BlockStore(this.archive, h, this.L)));
    this.store = store;
    this.lo = h.bound.range?.[0] ?? 0;
    this.hi = h.bound.range?.[1] ?? 1;
    this.fill = h.fill === null ? null : h.dtype === 'f32' ? Math.fround(h.fill) : h.fill;
    $<HTMLSelectElement>('var').value = field;
    const p = Number.isInteger(plane) && plane >= 0 && plane < this.L.count ? plane : 0;
    this.view = { field, plane: p, r0: 0, c0: 0, s: 1 };
    this.fit();
    const planes = $<HTMLElement>('planes');
    planes.hidden = this.L.count <= 1;
    $<HTMLInputElement>('plane').max = String(this.L.count - 1);
    const leadAxes = this.L.what === 'slice' ? (h.nd_shape?.length ?? 2) - 2 : this.L.what === 'snapshot' ? (matrixLead(h) ?? 0) : 0;
    const lead = (h.dims ?? []).slice(0, leadAxes);
    $('plane-name').textContent = `${this.L.what}${lead.length ? ` (${lead.join(', ')})` : ''}`;
    $('plane-of').textContent = `of ${this.L.count}`;
    const unit = typeof h.attrs.units === 'string' ? h.attrs.units : '';
    const long = typeof h.attrs.long_name === 'string' ? h.attrs.long_name : '';
    $('title').textContent = `${this.info.label}: ${h.name}${long ? ` (${long})` : ''}`;
    $('units').textContent = `${long || h.name}${unit ? ` [${unit}]` : ''}`;
    this.about(unit);
    this.colourBar();
  }

  private about(unit: string): void {
    const h = this.h;
    const b = h.bound;
    const rows: [string, string][] = [
      ['shape', `${(h.nd_shape ?? h.shape).join(' x ')}${h.dims ? ` (${h.dims.join(', ')})` : ''}`],
      ['stored as', `${h.shape.join(' x ')}${h.slices && h.slices > 1 ? ` x ${h.slices} slices` : ''}${h.layout ? `, layout ${h.layout}` : ''}, ${h.dtype}`],
      ['tiles', `${h.tile.join(' x ')}`],
      ['bound', `${formatBound(b)}: ${isPointwise(b.mode) ? 'every value' : 'RMSE'} within ${show(b.tolerance)}${unit ? ` ${unit}` : ''}`],
      ['value range', b.range ? `${show(b.range[0])} .. ${show(b.range[1])}` : 'no valid values'],
      ['fill value', h.fill === null ? 'none' : show(h.fill)],
    ];
    $('about').replaceChildren(...rows.flatMap(([k, v]) => [Object.assign(document.createElement('dt'), { textContent: k }), Object.assign(document.createElement('dd'), { textContent: v })]));
  }

  /** The whole plane in the canvas, centred. */
  private fit(): void {
    const w = this.canvas.width;
    const h = this.canvas.height;
    const s = Math.min(MAX_SCALE, Math.min(w / this.L.cols, h / this.L.rows));
    this.view = { ...this.view, s, r0: this.L.rows / 2 - h / 2 / s, c0: this.L.cols / 2 - w / 2 / s };
  }

  /** Zoom by `f` keeping the cell under canvas point (x, y) in place. */
  private zoom(f: number, x = this.canvas.width / 2, y = this.canvas.height / 2): void {
    const v = this.view;
    const fitted = Math.min(this.canvas.width / this.L.cols, this.canvas.height / this.L.rows);
    const s = Math.min(MAX_SCALE, Math.max(fitted / 8, v.s * f));
    this.view = { ...v, s, r0: v.r0 + y / v.s - y / s, c0: v.c0 + x / v.s - x / s };
    this.changed();
  }

  private resize(): void {
    const box = this.canvas.getBoundingClientRect();
    this.canvas.width = Math.max(1, Math.floor(box.width));
    this.canvas.height = Math.max(1, Math.floor(box.height));
  }

  private wire(): void {
    const stage = $('stage');
    let drag: { x: number; y: number; r0: number; c0: number } | null = null;
    stage.addEventListener('pointerdown', (e) => {
      drag = { x: e.clientX, y: e.clientY, r0: this.view.r0, c0: this.view.c0 };
      stage.setPointerCapture(e.pointerId);
      stage.classList.add('dragging');
    });
    stage.addEventListener('pointermove', (e) => {
      if (drag !== null) {
        this.view = { ...this.view, r0: drag.r0 - (e.clientY - drag.y) / this.view.s, c0: drag.c0 - (e.clientX - drag.x) / this.view.s };
        this.changed();
      }
      this.pointer = [e.offsetX, e.offsetY];
      this.probe();
    });
    stage.addEventListener('pointerleave', () => (this.pointer = null));
    const end = () => {
      drag = null;
      stage.classList.remove('dragging');
    };
    stage.addEventListener('pointerup', end);
    stage.addEventListener('pointercancel', end);
    stage.addEventListener(
      'wheel',
      (e) => {
        e.preventDefault();
        const lines = e.deltaMode === 1 ? 40 : e.deltaMode === 2 ? 400 : 1;
        this.pointer = [e.offsetX, e.offsetY];
        this.zoom(Math.exp(-e.deltaY * lines * 0.002), e.offsetX, e.offsetY);
      },
      { passive: false },
    );
    $('zoom-in').addEventListener('click', () => this.zoom(2));
    $('zoom-out').addEventListener('click', () => this.zoom(0.5));
    $('fit').addEventListener('click', () => {
      this.fit();
      this.changed();
    });
    document.addEventListener('keydown', (e) => {
      if (e.target instanceof HTMLInputElement || e.target instanceof HTMLSelectElement) return;
      const pan = 60 / this.view.s;
      const moves: Record<string, () => void> = {
        '+': () => this.zoom(2),
        '=': () => this.zoom(2),
        '-': () => this.zoom(0.5),
        '0': () => (this.fit(), this.changed()),
        ArrowLeft: () => ((this.view.c0 -= pan), this.changed()),
        ArrowRight: () => ((this.view.c0 += pan), this.changed()),
        ArrowUp: () => ((this.view.r0 -= pan), this.changed()),
        ArrowDown: () => ((this.view.r0 += pan), this.changed()),
      };
      moves[e.key]?.();
    });
    $<HTMLSelectElement>('var').addEventListener('change', (e) => {
      this.use((e.target as HTMLSelectElement).value, 0);
      this.changed();
    });
    const plane = $<HTMLInputElement>('plane');
    const go = (p: number) => {
      if (!Number.isInteger(p) || p < 0 || p >= this.L.count) return;
      this.view = { ...this.view, plane: p };
      plane.value = String(p);
      this.changed();
    };
    plane.addEventListener('change', () => go(Number(plane.value)));
    $('prev').addEventListener('click', () => go(this.view.plane - 1));
    $('next').addEventListener('click', () => go(this.view.plane + 1));
    new ResizeObserver(() => {
      this.resize();
      this.changed();
    }).observe(stage);
  }

  /** The view changed: redraw now, fetch what it lacks, keep it in the address. */
  private changed(): void {
    const v = this.view;
    $<HTMLInputElement>('plane').value = String(v.plane);
    // The exact view, for tests and scripts that compare the canvas with decoded values.
    document.body.dataset.view = JSON.stringify({ ...v, width: this.canvas.width, height: this.canvas.height });
    history.replaceState(null, '', `#var=${encodeURIComponent(v.field)}&plane=${v.plane}&r=${+v.r0.toFixed(3)}&c=${+v.c0.toFixed(3)}&s=${+v.s.toPrecision(6)}`);
    $('zoom').textContent = v.s >= 1 ? `${+v.s.toFixed(2)} px per cell` : `${+(1 / v.s).toFixed(2)} cells per px${stepOf(v.s) > 1 ? ` (${every(stepOf(v.s))})` : ''}`;
    this.draw();
    this.probe();
    void this.fetch();
  }

  /** Blocks of the plane the canvas shows, and the sampling step. */
  private needed(): { want: [number, number][]; k: number } {
    const { L, view: v } = this;
    const k = stepOf(v.s);
    const rows = [Math.max(0, Math.floor(v.r0 + 0.5 / v.s)), Math.min(L.rows - 1, Math.floor(v.r0 + (this.canvas.height - 0.5) / v.s))];
    const cols = [Math.max(0, Math.floor(v.c0 + 0.5 / v.s)), Math.min(L.cols - 1, Math.floor(v.c0 + (this.canvas.width - 0.5) / v.s))];
    const want: [number, number][] = [];
    if (rows[0] > rows[1] || cols[0] > cols[1]) return { want, k };
    for (let bi = Math.floor(rows[0] / L.blockRows); bi <= Math.floor(rows[1] / L.blockRows); bi++) {
      for (let bj = Math.floor(cols[0] / L.blockCols); bj <= Math.floor(cols[1] / L.blockCols); bj++) want.push([bi, bj]);
    }
    return { want, k };
  }

  private async fetch(): Promise<void> {
    const gen = ++this.gen;
    const { want, k } = this.needed();
    const store = this.store;
    document.body.dataset.state = 'loading';
    $('status').textContent = `reading ${want.length} block${want.length === 1 ? '' : 's'}...`;
    try {
      await store.load(this.view.plane, want, k, () => this.redraw(), () => gen === this.gen);
    } catch (e) {
      if (gen === this.gen) {
        document.body.dataset.state = 'failed';
        $('status').textContent = `cannot read: ${e instanceof Error ? e.message : String(e)}`;
      }
      return;
    }
    if (gen !== this.gen) return;
    this.draw();
    this.probe();
    const t = store.tally;
    const blocks = `${want.length} ${this.L.what === 'snapshot' ? 'band' : 'tile'}${want.length === 1 ? '' : 's'} in view`;
    const coarse = t.coarseReads > 0 ? `, ${t.coarseReads} of them coarse first (${t.prefixTiles} tiles from payload prefixes at ${COARSE_BOUND})` : '';
    $('status').textContent = `${blocks}; ${t.reads} window read${t.reads === 1 ? '' : 's'} of '${this.h.name}' so far${coarse}`;
    $('traffic').textContent = `${this.source.requests} HTTP requests, ${(this.source.bytesFetched / 1024).toFixed(1)} KiB of ${(this.archive.size / 1024).toFixed(1)} KiB`;
    document.body.dataset.requests = String(this.source.requests);
    document.body.dataset.gen = String(gen);
    document.body.dataset.state = 'ready';
  }

  private redraw(): void {
    if (this.frame === 0) this.frame = requestAnimationFrame(() => ((this.frame = 0), this.draw()));
  }

  private colour(v: number): Rgb {
    if (!Number.isFinite(v) || v === this.fill) return MISSING;
    return mapColour('viridis', this.hi > this.lo ? (v - this.lo) / (this.hi - this.lo) : 0.5);
  }

  /** Draw the canvas from the blocks held (see the sampling rule at the top). */
  private draw(): void {
    const { L, view: v, canvas } = this;
    const W = canvas.width;
    const H = canvas.height;
    const img = this.ctx.createImageData(W, H);
    const d = img.data;
    const k = stepOf(v.s);
    const sample = (a0: number, i: number, n: number) => {
      const x = Math.floor(a0 + (i + 0.5) / v.s);
      return x < 0 || x >= n ? -1 : x - (x % k);
    };
    const cols = Int32Array.from({ length: W }, (_, x) => sample(v.c0, x, L.cols));
    for (let y = 0; y < H; y++) {
      const r = sample(v.r0, y, L.rows);
      const bi = Math.floor(r / L.blockRows);
      let bj = -1;
      let block: Block | undefined;
      for (let x = 0; x < W; x++) {
        const c = cols[x];
        let rgb: Rgb;
        if (r < 0 || c < 0) rgb = OUTSIDE;
        else {
          const j = Math.floor(c / L.blockCols);
          if (j !== bj) {
            bj = j;
            block = this.store.get(v.plane, bi, bj, k);
          }
          rgb = block === undefined ? UNREAD : this.colour(blockValue(block, r, c));
        }
        const o = 4 * (y * W + x);
        d[o] = rgb[0];
        d[o + 1] = rgb[1];
        d[o + 2] = rgb[2];
        d[o + 3] = 255;
      }
    }
    this.ctx.putImageData(img, 0, 0);
  }

  /** The colour bar: the field's range bottom to top, with the ticks `preview` uses. */
  private colourBar(): void {
    const bar = $<HTMLCanvasElement>('bar');
    const g = bar.getContext('2d')!;
    const top = 8;
    const h = bar.height - 2 * top;
    g.clearRect(0, 0, bar.width, bar.height);
    for (let y = 0; y < h; y++) {
      const [r, gr, b] = mapColour('viridis', 1 - y / Math.max(1, h - 1));
      g.fillStyle = `rgb(${r},${gr},${b})`;
      g.fillRect(0, top + y, 24, 1);
    }
    g.strokeStyle = '#000';
    g.strokeRect(0.5, top + 0.5, 24, h - 1);
    g.fillStyle = '#000';
    g.font = '12px system-ui, sans-serif';
    g.textBaseline = 'middle';
    for (const t of ticks(this.lo, this.hi)) {
      const y = top + Math.round((this.hi > this.lo ? 1 - (t - this.lo) / (this.hi - this.lo) : 0.5) * (h - 1));
      g.fillRect(24, y, 6, 1);
      g.fillText(tickLabel(t), 34, y);
    }
  }

  /** What lies under the pointer. */
  private probe(): void {
    if (this.pointer === null) return;
    const [x, y] = this.pointer;
    const { L, h, view: v } = this;
    const k = stepOf(v.s);
    const at = (a0: number, i: number) => Math.floor(a0 + (i + 0.5) / v.s);
    const r0 = at(v.r0, y);
    const c0 = at(v.c0, x);
    const out: [string, string][] = [];
    if (r0 < 0 || c0 < 0 || r0 >= L.rows || c0 >= L.cols) out.push(['cell', 'outside the field']);
    else {
      const r = r0 - (r0 % k);
      const c = c0 - (c0 % k);
      const block = this.store.get(v.plane, Math.floor(r / L.blockRows), Math.floor(c / L.blockCols), k);
      const value = block === undefined ? null : blockValue(block, r, c);
      const unit = typeof h.attrs.units === 'string' ? ` ${h.attrs.units}` : '';
      out.push(['value', value === null ? 'not read yet' : !Number.isFinite(value) || value === this.fill ? `missing (${show(value)})` : `${show(value)}${unit}${block?.coarse ? ' (coarse)' : ''}`]);
      out.push(['plane cell', `row ${r}, column ${c}${k > 1 ? ` (${every(k)})` : ''}`]);
      const idx = ndIndex(h, L, v.plane, r, c);
      const dims = h.dims ?? (idx.length === 3 ? ['slice', 'row', 'column'] : ['row', 'column']);
      out.push(['index', idx.map((i, a) => `${dims[a]} ${i}`).join(', ')]);
      for (const [a, i] of idx.entries()) {
        const coord = h.dims ? this.info.coords[h.dims[a]] : undefined;
        if (coord !== undefined && i < coord.length) out.push([h.dims![a], show(coord[i])]);
      }
      out.push(['bound', `${formatBound(h.bound)} (${isPointwise(h.bound.mode) ? 'pointwise' : 'RMSE'} ${show(h.bound.tolerance)}${unit})`]);
      const t = tileOf(h, L, v.plane, r, c);
      if (t !== null) {
        out.push(['tile', String(t)]);
        void this.archive.tileEntry(h.name, t).then((e) => {
          const dd = document.querySelector('#probe dd:last-of-type');
          if (dd && dd.textContent === String(t)) dd.textContent = `${t}: rank ${e.rank}, recorded max error ${show(e.max_err)}, RMSE ${show(e.rmse)}`;
        });
      }
    }
    $('probe').replaceChildren(...out.flatMap(([k2, val]) => [Object.assign(document.createElement('dt'), { textContent: k2 }), Object.assign(document.createElement('dd'), { textContent: val })]));
  }
}

/** Open the archive the server offers and start the viewer. */
async function main(): Promise<void> {
  try {
    const info = (await (await fetch('./info.json')).json()) as Info;
    const source = new HttpSource(new URL('./archive', location.href).href, { label: info.label });
    // Adjacent byte ranges only are merged: a gap between two wanted tiles is never fetched.
    const archive = await open(source, { coalesce: { maxGap: 0 } });
    const viewer = new Viewer(archive, source, info);
    viewer.start();
  } catch (e) {
    document.body.dataset.state = 'failed';
    $('status').textContent = `cannot open the archive: ${e instanceof Error ? e.message : String(e)}`;
  }
}

void main();
