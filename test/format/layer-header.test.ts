/**
 * Hostile field layers (spec/FORMAT.md 6.2.2, 4 and 15): a layered archive
 * made by test/format/layered.ts, its header rewritten with every CRC and
 * offset recomputed (test/format/paged.ts), so that only what the layer
 * element says is wrong. Each is refused at open with one FormatError whose
 * message names the field and what is wrong.
 */
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { FLAG_LAYER } from '../../src/format/container.js';
import { FormatCode, FormatError } from '../../src/errors.js';
import { layeredArchive, smoothFactors } from './layered.js';
import { rebuild, type Block } from './paged.js';

/** Field 0: 'field' (2 slices of 24 x 40, layer rank 3); field 1 its left factor (48 x 3), field 2 its right (40 x 3); field 3 a plain copy of field 0. */
function base(): Uint8Array {
  const { left, right } = smoothFactors(48, 40, 3);
  const v = new Float64Array(48 * 40).map((_, c) => Math.sin(c / 9));
  return layeredArchive({ values: v, shape: [24, 40], slices: 2, tile: [8, 10], tol: 1e-2, rank: 3, left, right, factorTile: [8, 3], twin: true }).bytes;
}

async function refusal(b: Uint8Array, limits = {}): Promise<FormatError> {
  const e = await open(b, { limits }).then(
    async (a) => {
      for (const n of a.names) await a.read(n);
      return null;
    },
    (x: unknown) => x,
  );
  if (!(e instanceof FormatError)) throw new Error(`expected a FormatError, got ${e === null ? 'success' : String(e)}`);
  return e;
}

const B = base();
const header = (edit: (h: Block) => void) => rebuild(B, { header: edit });

describe('a hostile layer element is refused at open', () => {
  const cases: [string, (h: Block) => void, RegExp][] = [
    ['not an array', (h) => (h.fields[0].layer = 5), /^archive field 'field': layer is .*, not nil or an array of three integers \[rank, left, right\]$/],
    ['two elements', (h) => (h.fields[0].layer = [3, 1]), /layer is an array of 2, not nil or an array of three integers/],
    ['a fractional rank', (h) => (h.fields[0].layer = [1.5, 1, 2]), /not nil or an array of three integers/],
    ['rank 0', (h) => (h.fields[0].layer = [0, 1, 2]), /layer rank 0 is below 1$/],
    ['rank above min(slices x rows, cols)', (h) => (h.fields[0].layer = [41, 1, 2]), /layer rank 41 exceeds the field's 48x40$/],
    ['a factor index past the field list', (h) => (h.fields[0].layer = [3, 4, 2]), /layer left factor names field 4, but the header has fields 0 to 3$/],
    ['a negative factor index', (h) => (h.fields[0].layer = [3, 1, -1]), /layer right factor names field -1/],
    ['the field itself', (h) => (h.fields[0].layer = [3, 0, 2]), /layer left factor names the field itself$/],
    ['left and right the same field', (h) => (h.fields[0].layer = [3, 1, 1]), /layer left and right factors name the same field 1$/],
    ['an f32 factor field', (h) => (h.fields[1].dtype = 'f32'), /layer left factor \(field 1, 'field\.left'\) is f32, not f64$/],
    ['a factor field of the wrong width', (h) => (h.fields[0].layer = [2, 1, 2]), /layer left factor \(field 1, 'field\.left'\) has shape 48x3, not 48x2$/],
    ['a factor field of the wrong length', (h) => (h.fields[0].layer = [3, 2, 1]), /layer left factor \(field 2, 'field\.right'\) has shape 40x3, not 48x3$/],
    ['a factor field with a fill value', (h) => (h.fields[2].fill = new Uint8Array(8)), /layer right factor \(field 2, 'field\.right'\) has a fill value$/],
    ['a factor field with N-D keys', (h) => (h.fields[1].nd_shape = [48, 3]), /layer left factor \(field 1, 'field\.left'\) has N-D keys$/],
    ['a factor field with a layer of its own', (h) => (h.fields[1].layer = [1, 2, 3]), /layer left factor \(field 1, 'field\.left'\) has a layer of its own$/],
    ['a factor field used by two layers', (h) => (h.fields[3].layer = [3, 1, 2]), /^archive field 'field\.twin': layer left factor \(field 1, 'field\.left'\) already holds the left factor of field 0$/],
  ];
  for (const [what, edit, message] of cases) {
    it(what, async () => {
      const e = await refusal(header(edit));
      expect(e.code).toBe(FormatCode.Malformed);
      expect(e.message).toMatch(message);
    });
  }

  it('a layer rank above the reader limit on ranks is refused with code limit', async () => {
    const e = await refusal(B, { maxRank: 2 });
    expect(e.code).toBe(FormatCode.Limit);
    expect(e.message).toMatch(/^archive field 'field': layer rank 3 exceeds the reader limit of 2$/);
  });

  it('a layer without required flag bit 1 is refused', async () => {
    const e = await refusal(rebuild(B, { flags: 0x1 }));
    expect(e.code).toBe(FormatCode.Malformed);
    expect(e.message).toMatch(/field 'field' has a field layer but required flag bit 1 \(layer\) is not set$/);
  });
});

describe('what a reader accepts around the layer element', () => {
  it('the archive as written opens, with bit 1 set and the factor fields marked', async () => {
    const a = await open(B);
    expect(new DataView(B.buffer, B.byteOffset).getUint16(10, true) & FLAG_LAYER).toBe(FLAG_LAYER);
    expect(a.header.fields.map((f) => f.factorOf ?? null)).toEqual([null, { field: 0, side: 'left' }, { field: 0, side: 'right' }, null]);
    expect(a.mainNames).toEqual(['field', 'field.twin']);
  });

  it('elements after the ninth are ignored (spec/FORMAT.md 6.2)', async () => {
    const a = await open(header((h) => (h.fields[0].later = ['anything', 1])));
    expect(a.header.fields[0].layer).toEqual({ rank: 3, left: 1, right: 2 });
  });

  it('a nil layer followed by a later element is no layer: nothing is a factor field', async () => {
    const a = await open(
      header((h) => {
        delete h.fields[0].layer;
        h.fields[0].later = 1;
      }),
    );
    expect(a.header.fields[0].layer).toBeUndefined();
    expect(a.mainNames).toEqual(['field', 'field.left', 'field.right', 'field.twin']);
  });
});
