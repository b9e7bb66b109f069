/**
 * What `pack` reports once the archive is written: per field its size and
 * ratio, how its tiles and bytes are used, and every choice pack made on
 * its own (tile shape, layout, threads), as text and as one JSON object.
 */
import { availableParallelism } from 'node:os';
import { printable, type FieldHeader } from '../format/schema.js';
import { openArchiveSource } from './files.js';
import { archiveFacts, type ArchiveFacts, type FieldFacts } from './show.js';
import { byteShares, sharesText, tileUseText, type ByteShares } from './summary.js';

/** What pack chose itself, and what the user fixed. */
export interface PackChoices {
  /** The tile shape was tried on a sample ('auto') or given with --tile. */
  tile: 'auto' | 'given';
  /**
   * The layout of N-D variables was tried on a sample ('auto', NetCDF), given
   * (--layout, --matrix), or the default of N-D .npy and raw input, slices
   * ('default'); null for 2-D input.
   */
  layout: 'auto' | 'given' | 'default' | null;
  /** Threads encoding tiles, and whether that number was chosen by pack. */
  threads: number;
  threadsAuto: boolean;
}

/** The choices of a pack run from its flags; `threads` is the resolved count of the largest field. */
export function packChoices(tile: unknown, layout: PackChoices['layout'], given: number | undefined, resolved: number | undefined): PackChoices {
  return {
    tile: tile === undefined || tile === 'auto' ? 'auto' : 'given',
    layout,
    threads: resolved ?? given ?? availableParallelism(),
    threadsAuto: given === undefined || resolved !== given,
  };
}

/** The facts of a freshly written archive file, with its payload bytes counted by role. */
export async function writtenFacts(path: string): Promise<ArchiveFacts> {
  // One open file for the index and the payloads: a concurrent `pack --force` may replace the path meanwhile.
  const { archive, src } = await openArchiveSource(path);
  try {
    const ix = await archive.loadIndex();
    const shares: ByteShares[] = [];
    for (const f of ix.fields) shares.push(await byteShares(src, f, path));
    return archiveFacts(archive, path, shares);
  } finally {
    await archive.close();
  }
}

/** The lines that follow pack's summary line: choices, then per field how it is stored. */
export function packDetails(facts: ArchiveFacts, c: PackChoices, many: boolean): string {
  const lines: string[] = [];
  const tiles = [...new Set(facts.fields.map((f) => f.tile.join(' x ')))].join(', ');
  const auto = (what: boolean, how: string) => (what ? ` (chosen automatically: ${how})` : '');
  lines.push(`  tile ${tiles}${auto(c.tile === 'auto', 'the shape that packed smallest on a sample; --tile fixes it')}`);
  if (c.layout !== null) {
    const layouts = [...new Set(facts.fields.map((f) => f.layout ?? 'plain'))].join(', ');
    const how = c.layout === 'default' ? ' (the default for .npy and raw arrays of 3+ axes; --matrix lays them out as a matrix)' : auto(c.layout === 'auto', 'the layout that packed smallest on a sample; --layout slices or --matrix fixes it');
    lines.push(`  layout ${layouts}${how}`);
  }
  lines.push(`  threads ${c.threads}${auto(c.threadsAuto, 'one for a field under 2^18 values or, with the tile chosen by trial, of at most 2^18; else the number of cores; --threads fixes it for the others')}`);
  for (const f of facts.fields) lines.push(...fieldLines(f, many));
  return lines.join('\n') + '\n';
}

/**
 * One line per field with a layer (its rank and factor fields), or, when a
 * layer was asked for ('auto') and none was kept, one line saying so; nothing
 * when no layer was asked for.
 */
export function layerText(fields: readonly FieldHeader[], asked: 'auto' | 'off' | number | undefined): string {
  if (asked === undefined || asked === 'off') return '';
  const lines = fields.filter((f) => f.layer).map((f) => `  layer of ${printable(f.name)}: rank ${f.layer!.rank}, factors in fields ${printable(fields[f.layer!.left].name)} and ${printable(fields[f.layer!.right].name)}${asked === 'auto' ? ' (chosen automatically: the rank that packed smallest on a sample)' : ''}\n`);
  if (lines.length === 0) return `  layer none${asked === 'auto' ? ' (chosen automatically: no rank packed smaller on a sample, or the field has fewer than 4 tiles)' : ''}\n`;
  return lines.join('');
}

/** How one field is stored; with `many`, named (pack's line per variable has given its size and ratio). */
function fieldLines(f: FieldFacts, many: boolean): string[] {
  const who = many ? `${printable(f.name)}: ` : '';
  const out = [`  ${who}${tileUseText(f.use)}`];
  if (f.bytes) out.push(`  ${who}bytes: ${sharesText(f.bytes)}`);
  return out;
}
