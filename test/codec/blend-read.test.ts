/**
 * Whole reads of archives of open data grids whose residuals use the blend
 * predictor, with the WebAssembly kernels and with the JavaScript: the
 * encoder checks its candidates with the decoder's walk, so the archives
 * must be the same bytes on both paths, and the reads the same values,
 * within the error bound of the original grid. The grids are those of
 * vega-datasets 3.2.1 (node_modules/vega-datasets/data): volcano.json
 * (Maunga Whau heights, 87 x 61) and annual-precip.json (360 x 168), as
 * given and with their lowest cells marked missing (NaN), which gives
 * tiles with a mask.
 */
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { open } from '../../src/archive.js';
import { Flag, residualPlace } from '../../src/codec/payload.js';
import { Predictor } from '../../src/codec/reconstruct.js';
import { pack } from '../../src/pack.js';
import { setKernelMode } from '../../src/wasm/kernels.js';

/** A vega-datasets grid, as bench/fields.ts loads it; with `below`, the cells under it marked missing (NaN). */
function vegaGrid(name: string, below = -Infinity): { rows: number; cols: number; values: Float32Array } {
  const path = fileURLToPath(new URL(`../../node_modules/vega-datasets/data/${name}.json`, import.meta.url));
  const g = JSON.parse(readFileSync(path, 'utf8')) as { width: number; height: number; values: (number | null)[] };
  return { rows: g.height, cols: g.width, values: Float32Array.from(g.values, (v) => (v === null || v < below ? NaN : v)) };
}

/** `run` with the kernels switched off, then on: both results. */
async function bothModes<T>(run: () => Promise<T> | T): Promise<{ js: T; wasm: T }> {
  try {
    setKernelMode('js');
    const js = await run();
    setKernelMode('auto');
    return { js, wasm: await run() };
  } finally {
    setKernelMode('auto');
  }
}

/** Per tile of the archive's first field: whether its residual uses the blend, and whether it has a mask. */
async function tileKinds(bytes: Uint8Array): Promise<{ blend: boolean; mask: boolean }[]> {
  const a = await open(bytes);
  const h = a.field().header;
  const count = Math.ceil(h.shape[0] / h.tile[0]) * Math.ceil(h.shape[1] / h.tile[1]);
  const out: { blend: boolean; mask: boolean }[] = [];
  for (let t = 0; t < count; t++) {
    const e = await a.tileEntry(undefined, t);
    const payload = bytes.subarray(e.offset, e.offset + e.length);
    const at = residualPlace(payload);
    out.push({ blend: at !== null && (payload[at.byteAt] & 7) === Predictor.Blend, mask: (payload[1] & Flag.Mask) !== 0 });
  }
  return out;
}

describe('reads of blend-predicted archives of vega-datasets grids', () => {
  // The missing-cell rule is ours: the cells under a level near each grid's lowest tenth.
  const grids = [
    { name: 'volcano', below: -Infinity },
    { name: 'volcano', below: 100 },
    { name: 'annual-precip', below: -Infinity },
    { name: 'annual-precip', below: 100 },
  ];
  const seen = { blend: 0, blendMasked: 0 };

  for (const { name, below } of grids) {
    for (const bound of ['rel:1e-3', 'rel:1e-4', 'abs:0.5']) {
      it(`${name}${below > -Infinity ? ` (cells under ${below} missing)` : ''} at ${bound}: the same archive and values with and without the kernels, within the bound`, async () => {
        const g = vegaGrid(name, below);
        const packed = await bothModes(() => pack(g.values, [g.rows, g.cols], { bound }));
        expect(Buffer.from(packed.wasm).equals(Buffer.from(packed.js))).toBe(true);
        const bytes = packed.wasm;
        const read = await bothModes(async () => (await (await open(bytes)).read()).values);
        expect(Buffer.from(read.wasm.buffer).equals(Buffer.from(read.js.buffer))).toBe(true);
        // The bound: rel:x is x times the range of the valid values, abs:x is x (src/codec/bound.ts, resolveBound).
        const valid = g.values.filter((v) => v === v);
        const lo = valid.reduce((a, v) => Math.min(a, v), Infinity);
        const hi = valid.reduce((a, v) => Math.max(a, v), -Infinity);
        const [mode, x] = bound.split(':');
        const tol = mode === 'rel' ? Number(x) * (hi - lo) : Number(x);
        let worst = 0;
        for (let c = 0; c < g.values.length; c++) {
          const v = g.values[c];
          if (v !== v) expect(Number.isNaN(read.wasm[c])).toBe(true);
          else worst = Math.max(worst, Math.abs(read.wasm[c] - v));
        }
        expect(worst).toBeLessThanOrEqual(tol);
        for (const k of await tileKinds(bytes)) {
          if (k.blend) seen.blend++;
          if (k.blend && k.mask) seen.blendMasked++;
        }
      });
    }
  }

  it('had tiles with the blend, with and without a mask, among them', () => {
    expect(seen.blend).toBeGreaterThan(seen.blendMasked);
    expect(seen.blendMasked).toBeGreaterThan(0);
  });
});
