/**
 * Encode a whole 2-D field tile by tile. Pointwise bounds are met per tile;
 * L2 bounds share the field's squared-error budget across tiles, discarding
 * the field-wide smallest singular values first (Eckart-Young).
 */
import { isPointwise, resolveBound } from './bound.js';
import { fillWords } from './mask.js';
import { ErrorTally } from './tally.js';
import { measure, measurePrefixes, type TileStats } from './measure.js';
import { planL2 } from './plan-l2.js';
import { prepareTile } from './prepare.js';
import { encodePointwise, exactPayload } from './tile-encode.js';
import { forEachTile, validRange, type BandSource, type FieldSpec } from './tiles.js';

export { extractTile, forEachTile, memoryBands, tileGrid, validRange, type BandSource, type FieldSpec } from './tiles.js';
export { measure, measurePrefixes, type TileStats } from './measure.js';

/** A finished tile. */
export interface EncodedTile {
  payload: Uint8Array;
  stats: TileStats;
}

/** What a field's encoding achieved. */
export interface FieldResult {
  /** The resolved absolute tolerance (pointwise limit, or RMSE limit). */
  tolerance: number;
  /** Min and max of the valid values (null when there are none). */
  range: [number, number] | null;
  valid: number;
  maxErr: number;
  rmse: number;
}

/**
 * Encode every tile of a field, handing each to `emit` in row-major tile
 * order as soon as it is done. The source is read once for the value range
 * and once more per encoding pass (L2 bounds make one extra pass).
 */
export function encodeField(src: BandSource, spec: FieldSpec, emit: (index: number, tile: EncodedTile) => void): FieldResult {
  const range = validRange(src, spec);
  const span = range ? range[1] - range[0] : 0;
  let tol = resolveBound(spec.bound, span);
  if (!Number.isFinite(tol)) tol = Number.MAX_VALUE;
  const fill = fillWords(spec.fill, spec.dtype);
  const summary = { tolerance: tol, range, valid: 0, maxErr: 0, rmse: 0 };
  const total = new ErrorTally();
  const pointwise = isPointwise(spec.bound.mode) || tol === 0;
  const plan = pointwise ? null : planL2(src, spec, tol, fill);
  forEachTile(src, spec, (index, tile, m, n) => {
    const t = plan?.kept(index) ?? prepareTile(tile, m, n, spec.dtype, fill, tol, spec.progressive ? 'doubling' : 'one');
    let payload: Uint8Array;
    let res: ReturnType<typeof measure>;
    if (plan) ({ payload, res } = plan.encode(t, index));
    else {
      payload = encodePointwise(t, tol);
      res = measure(payload, t, fill);
      // The safety net: a tile that fails its own check is stored exactly.
      if (!(res.stats.maxErr <= tol)) {
        payload = exactPayload(t);
        res = measure(payload, t, fill);
      }
    }
    summary.valid += t.valid;
    total.merge(res.tally);
    // Prefixes are measured (and recorded) for progressive layouts only.
    res.stats.prefix = spec.progressive ? measurePrefixes(payload, t, fill) : [];
    emit(index, { payload, stats: res.stats });
  });
  summary.maxErr = total.max;
  summary.rmse = total.rmse;
  return summary;
}
