/** `rankfield show`: what an archive holds, from its header and index only (no tile is decoded). */
import type { Command } from 'commander';
import { METHOD_NAMES, Method } from '../codec/payload.js';
import { formatBound, isPointwise, type Archive, type Attrs } from '../index.js';
import { isUrl, openArchiveSource } from './files.js';
import { bytesText, num, sourceBytes } from './format.js';
import type { Context } from './context.js';
import { printable } from '../format/schema.js';
import { carriedNames, KEY } from './netcdf.js';
import { Output, type OutputFlags } from './output.js';
import { byteShares, sharesText, tileUse, tileUseText, type ByteShares, type TileUse } from './summary.js';
import { PART_KEYS } from '../parts/part.js';

/** The facts `show` reports about one field. */
export interface FieldFacts {
  name: string;
  shape: number[];
  dtype: string;
  tile: number[];
  tiles: number;
  bound: { text: string; mode: string; value: number; tolerance: number; limits: 'pointwise' | 'rmse'; range: number[] | null };
  fill: number | null;
  cells: number;
  validCells: number;
  /** Bytes of the values as the source stored them (a NetCDF variable in its stored type). */
  rawBytes: number;
  payloadBytes: number;
  /** rawBytes / payloadBytes. */
  ratio: number;
  bitsPerValue: number;
  achieved: { maxErr: number; rmse: number };
  /** Tiles per method name. */
  methods: Record<string, number>;
  /** Tiles per rank, low-rank tiles only. */
  rankHistogram: Record<string, number>;
  /** Tiles stored exactly (not low-rank), counted apart from the rank histogram. */
  exactTiles: number;
  /** How the tiles are stored: with a low-rank part (and its mean rank), residual only, exactly. */
  use: TileUse;
  /** The payload bytes by role; null when not counted (archives read from a URL). */
  bytes: ByteShares | null;
  attrs: Attrs;
  /** Slices of shape stacked in the field (1 for plain fields). */
  slices: number;
  /** The original N-D shape, dimension names and layout, when recorded. */
  ndShape?: number[];
  dims?: string[];
  layout?: string;
  /** True when the values are CF-unpacked physical values (scale_factor / add_offset applied at pack time). */
  unpacked: boolean;
  /**
   * The field's layer (spec/FORMAT.md 6.2.2): its rank, the names of its two
   * factor fields, and their payload bytes (counted in this field's ratio).
   */
  layer?: { rank: number; left: string; right: string; bytes: number };
  /** For a field holding a factor of another field's layer: that field and the side (its bytes count there). */
  factorOf?: { field: string; side: 'left' | 'right' };
}

/** The facts `show` reports about an archive. */
export interface ArchiveFacts {
  file: string;
  fileBytes: number;
  version: number;
  writer: string;
  attrs: Attrs;
  /** Variables of a NetCDF source carried losslessly in the archive's attributes (not packed as fields). */
  carried: string[];
  rawBytes: number;
  /** rawBytes / fileBytes. */
  ratio: number;
  /** Bytes of the file outside the tile payloads: prologue, header, index and tail. */
  containerBytes: number;
  fields: FieldFacts[];
}

/**
 * Gather the facts of an opened archive whose whole index is loaded
 * ({@link Archive.loadIndex}); `shares` are the byte shares per field, when counted.
 */
export function archiveFacts(archive: Archive, file: string, shares: ByteShares[] | null = null): ArchiveFacts {
  const all = archive.header.fields;
  const payloadOf = (i: number) => archive.index.fields[i].length.reduce((a, b) => a + b, 0);
  const fields = all.map((h, i): FieldFacts => {
    const ix = archive.index.fields[i];
    const payloadBytes = payloadOf(i);
    const layer = h.layer ? { rank: h.layer.rank, left: all[h.layer.left].name, right: all[h.layer.right].name, bytes: payloadOf(h.layer.left) + payloadOf(h.layer.right) } : undefined;
    const cells = (h.slices ?? 1) * h.shape[0] * h.shape[1];
    const methods: Record<string, number> = {};
    const ranks = new Map<number, number>();
    let exactTiles = 0;
    ix.method.forEach((m, t) => {
      const label = METHOD_NAMES[m] ?? `method-${m}`;
      methods[label] = (methods[label] ?? 0) + 1;
      if (m === Method.Exact) exactTiles++;
      else ranks.set(ix.rank[t], (ranks.get(ix.rank[t]) ?? 0) + 1);
    });
    const rankHistogram = Object.fromEntries([...ranks.entries()].sort((a, b) => a[0] - b[0]).map(([r, n]) => [String(r), n]));
    const raw = sourceBytes(h);
    return {
      name: h.name,
      shape: h.shape,
      dtype: h.dtype,
      tile: h.tile,
      tiles: ix.offset.length,
      bound: {
        text: formatBound(h.bound),
        mode: h.bound.mode,
        value: h.bound.value,
        tolerance: h.bound.tolerance,
        limits: isPointwise(h.bound.mode) ? 'pointwise' : 'rmse',
        range: h.bound.range,
      },
      fill: h.fill,
      cells,
      validCells: ix.summary.valid,
      rawBytes: raw,
      payloadBytes,
      ratio: raw / (payloadBytes + (layer?.bytes ?? 0)),
      bitsPerValue: ((payloadBytes + (layer?.bytes ?? 0)) * 8) / cells,
      achieved: { maxErr: ix.summary.max_err, rmse: ix.summary.rmse },
      methods,
      rankHistogram,
      exactTiles,
      use: tileUse(ix),
      bytes: shares?.[i] ?? null,
      attrs: h.attrs,
      slices: h.slices ?? 1,
      ...(h.nd_shape ? { ndShape: h.nd_shape } : {}),
      ...(h.dims ? { dims: h.dims } : {}),
      ...(h.layout ? { layout: h.layout } : {}),
      unpacked: h.attrs['rankfield:unpacked'] === true,
      ...(layer ? { layer } : {}),
      ...(h.factorOf ? { factorOf: { field: all[h.factorOf.field].name, side: h.factorOf.side } } : {}),
    };
  });
  // Factor fields are no values of the user's: the archive's raw bytes are those of the other fields.
  const raw = fields.reduce((a, f) => a + (f.factorOf ? 0 : f.rawBytes), 0);
  const payloads = fields.reduce((a, f) => a + f.payloadBytes, 0);
  return {
    file,
    fileBytes: archive.size,
    version: archive.header.version,
    writer: archive.header.writer,
    attrs: archive.header.attrs,
    carried: carriedNames(archive.header.attrs),
    rawBytes: raw,
    ratio: raw / archive.size,
    containerBytes: archive.size - payloads,
    fields,
  };
}

/** Prefix of the attributes rankfield keeps for itself: shown by `show --json` only. */
const BOOKKEEPING = 'rankfield:';

function attrsText(attrs: Attrs): string {
  return Object.entries(attrs)
    .map(([k, v]) => `${printable(k)}=${printable(JSON.stringify(v))}`)
    .join(', ');
}

/** Render the facts as text. */
export function factsText(a: ArchiveFacts): string {
  const main = a.fields.filter((f) => f.factorOf === undefined);
  const lines = [
    `archive  ${a.file}: format version ${a.version}, written by ${a.writer}`,
    `size     ${bytesText(a.fileBytes)} for ${main.length} field${main.length === 1 ? '' : 's'} (${bytesText(a.rawBytes)} of raw values): ratio ${a.ratio.toFixed(2)}; header, index and tail ${bytesText(a.containerBytes)}`,
  ];
  if (a.fields.length > 1) {
    for (const f of a.fields) {
      const what = f.factorOf ? ` (${f.factorOf.side} factor of the layer of '${printable(f.factorOf.field)}', counted there)` : f.layer ? ` with its layer's ${bytesText(f.layer.bytes)}, ratio ${f.ratio.toFixed(2)}` : `, ratio ${f.ratio.toFixed(2)}`;
      lines.push(`  ${printable(f.name)}: ${bytesText(f.payloadBytes)}${what}`);
    }
  }
  // The NetCDF source's dimensions, variable order and carried variables are bookkeeping (and can be large): named, not printed.
  const own = new Set<string>([KEY.dims, KEY.order, KEY.carried]);
  const shown = Object.fromEntries(Object.entries(a.attrs).filter(([k]) => !own.has(k) && !k.startsWith(BOOKKEEPING)));
  if (Object.keys(shown).length > 0) lines.push(`attrs    ${attrsText(shown)}`);
  const part = a.attrs[PART_KEYS.part];
  const rows = a.attrs[PART_KEYS.rows];
  if (Array.isArray(part) && Array.isArray(rows)) {
    lines.push(`part     ${part.join('/')} of run '${printable(String(a.attrs[PART_KEYS.run]))}': rows ${rows[0]}..${Number(rows[1]) - 1} of a field of ${rows[2]} rows; 'rankfield join' puts every part of the run together`);
  }
  if (a.carried.length > 0) lines.push(`carried  losslessly (not packed as fields; unpack -o OUT.nc restores them): ${a.carried.map(printable).join(', ')}`);
  for (const f of a.fields) {
    const grid = `${f.slices > 1 ? `${f.slices} slices x ` : ''}${Math.ceil(f.shape[0] / f.tile[0])} x ${Math.ceil(f.shape[1] / f.tile[1])}`;
    const range = f.bound.range ? `valid range [${num(f.bound.range[0])}, ${num(f.bound.range[1])}]` : 'no valid values';
    const ranks = Object.entries(f.rankHistogram).map(([r, n]) => `${r}:${n}`);
    lines.push(
      `field '${printable(f.name)}'`,
      `  shape        ${f.slices > 1 ? `${f.slices} slices of ` : ''}${f.shape[0]} x ${f.shape[1]} ${f.dtype}; tiles ${f.tile[0]} x ${f.tile[1]} (${grid} = ${f.tiles} tiles)`,
      `  bound        ${f.bound.text} -> ${f.bound.limits === 'pointwise' ? 'pointwise limit' : 'RMSE limit'} E = ${num(f.bound.tolerance)} (${range})`,
      `  missing      ${f.cells - f.validCells} of ${f.cells} cells (NaN, infinities${f.fill === null ? '' : `, fill ${num(f.fill)}`}), kept exactly`,
      `  payload      ${bytesText(f.payloadBytes)}${f.layer ? ` + ${bytesText(f.layer.bytes)} of layer factors` : ''}; ratio ${f.ratio.toFixed(2)}; ${f.bitsPerValue.toFixed(3)} bits per value`,
      `  holds        ${tileUseText(f.use)}`,
      `  bytes        ${f.bytes ? sharesText(f.bytes) : '(not counted for an archive read from a URL: that needs every payload)'}`,
      `  achieved     max error ${num(f.achieved.maxErr)}, RMSE ${num(f.achieved.rmse)} (E = ${num(f.bound.tolerance)})`,
      `  methods      ${Object.entries(f.methods).map(([m, n]) => `${m} ${n}`).join(', ')}`,
      `  ranks        ${ranks.length > 0 ? ranks.join('  ') : '(no low-rank tiles)'}${f.exactTiles > 0 ? `  | exact: ${f.exactTiles}` : ''}`,
    );
    if (f.layer) {
      lines.push(`  layer        rank ${f.layer.rank} over the whole field, added to every low-rank tile: left factor '${printable(f.layer.left)}', right factor '${printable(f.layer.right)}'`);
    }
    if (f.factorOf) {
      lines.push(`  factor       the ${f.factorOf.side} factor of the layer of field '${printable(f.factorOf.field)}': read with that field, unpacked only when named`);
    }
    if (f.ndShape) {
      const dims = f.dims ? ` (${f.dims.map((d) => printable(d)).join(', ')})` : '';
      const how = f.layout === undefined ? '' : f.layout === 'slices' ? '; layout slices: the last two axes are each slice' : `; layout ${printable(f.layout)}: the first ${f.layout.slice(7)} axes are the rows, the rest the columns`;
      lines.push(`  variable     ${f.ndShape.join(' x ')}${dims}${how}; unpack restores this shape`);
    }
    if (f.unpacked) {
      const p = f.attrs['rankfield:packing'];
      lines.push(`  values       unpacked physical values (CF scale_factor/add_offset ${Array.isArray(p) ? p.join(', ') : ''} applied at pack time; the bound applies to them)`);
    }
    // The archive's own bookkeeping (rankfield:...) is shown in words above, or only in --json.
    const fieldAttrs = Object.fromEntries(Object.entries(f.attrs).filter(([k]) => !k.startsWith(BOOKKEEPING)));
    if (Object.keys(fieldAttrs).length > 0) lines.push(`  attrs        ${attrsText(fieldAttrs)}`);
  }
  return lines.join('\n') + '\n';
}

/** Register `show` on the program. */
export function registerShow(program: Command, ctx: Context): void {
  program
    .command('show')
    .summary('describe the fields of an archive')
    .description(
      'Describe an archive: per field its shape, dtype, tiles, bound and resolved tolerance E, compression ratio ' +
        '(raw value bytes / payload bytes; for the whole archive, raw value bytes / file size), bits per value, ' +
        'the ranks chosen per tile (exact tiles counted apart), the max error and RMSE recorded at pack time, ' +
        'and in words how many tiles use a low-rank part and which share of the bytes is low-rank factors, residual, ' +
        'exactly stored values and tile headers. A field with a layer (a rank-k product over the whole field, added to ' +
        'every low-rank tile) names it and its two factor fields, which are listed as fields of their own and marked so; ' +
        'its ratio counts the factor fields\' bytes.\n\n' +
        'For an archive file, the tile payloads are read to count their bytes by role; for a URL only the tail, header ' +
        'and index (directory and pages) are read, with HTTP Range requests. Use `rankfield check` to verify the tiles.',
    )
    .argument('<IN>', 'archive to describe: a file or an http(s) URL')
    .option('--json', 'print one JSON object with the same facts, unrounded')
    .action(async (input: string, flags: OutputFlags) => {
      const out = new Output(ctx, flags);
      // The payloads are read through the archive's own open file, so the index and the payloads are of one archive.
      const { archive, src } = await openArchiveSource(input);
      try {
        const ix = await archive.loadIndex();
        let shares: ByteShares[] | null = null;
        if (!isUrl(input)) {
          shares = [];
          for (const f of ix.fields) shares.push(await byteShares(src, f, input));
        }
        const facts = archiveFacts(archive, input, shares);
        out.result({ command: 'show', ...facts });
        out.text(factsText(facts));
      } finally {
        await archive.close();
      }
    });
}
