/**
 * One (field, bound, method) cell of the table: encode and decode timed,
 * the decoded values checked against the original, and the row marked
 * failed (with the reason) whenever the bound is not met.
 */
import { BaselineFailure } from './baselines/bytes.js';
import type { Codec } from './baselines/codec.js';
import { oracleValues, type TileSpectrum } from './baselines/oracle.js';
import { measure, meets, type FieldData, type Target } from './metrics.js';
import type { Row } from './report.js';
import { timeTask, type TimingOptions } from './timing.js';

/** Method id of the Eckart-Young floor rows. */
export const FLOOR_ID = 'eckart-young floor';

export function describeError(e: unknown): string {
  const err = e instanceof Error && !(e instanceof BaselineFailure) && e.cause instanceof Error ? e.cause : e;
  if (err instanceof BaselineFailure) return err.message;
  return `threw ${err instanceof Error ? `${err.name}: ${err.message}` : String(err)}`;
}

/** Encode (timed), decode (timed), check; also returns the encoded bytes when there are any. */
export async function runCodec(codec: Codec, field: FieldData & { id: string }, target: Target, timing: TimingOptions): Promise<{ row: Row; bytes: Uint8Array | null }> {
  const base: Row = { field: field.id, bound: target.text, method: codec.id, status: 'ok' };
  const skip = codec.skip?.(field, target) ?? null;
  if (skip) return { row: { ...base, status: 'skipped', reason: skip }, bytes: null };
  const mb = field.values.byteLength / 1e6;
  let bytes: Uint8Array | null = null;
  let decoded: Float32Array | null = null;
  let enc;
  try {
    enc = await timeTask(() => {
      bytes = codec.encode(field, target);
    }, timing);
  } catch (e) {
    if (!(e instanceof BaselineFailure || (e instanceof Error && e.cause instanceof BaselineFailure))) console.error(e);
    return { row: { ...base, status: 'failed', reason: `encode ${describeError(e)}` }, bytes: null };
  }
  const out = bytes as unknown as Uint8Array;
  let dec;
  try {
    dec = await timeTask(async () => {
      decoded = await codec.decode(out);
    }, timing);
  } catch (e) {
    console.error(e);
    return { row: { ...base, status: 'failed', reason: `decode ${describeError(e)}`, bytes: out.length }, bytes: out };
  }
  const row = finish(base, field, target, out, decoded as unknown as Float32Array, mb / (enc.medianMs / 1000), mb / (dec.medianMs / 1000), enc.runs, dec.runs);
  return { row, bytes: out };
}

export function finish(base: Row, field: FieldData, target: Target, bytes: Uint8Array, decoded: Float32Array, encMBs: number, decMBs: number, encRuns: number, decRuns: number): Row {
  const errors = measure(field.values, decoded, field.fill, target.range);
  const cells = field.rows * field.cols;
  const row: Row = {
    ...base,
    bytes: bytes.length,
    ratio: (cells * 4) / bytes.length,
    bpv: (8 * bytes.length) / cells,
    errors,
    maxOverE: errors.maxErr / target.tol,
    encMBs,
    decMBs,
    encRuns,
    decRuns,
  };
  if (!meets(errors, target)) {
    row.status = 'failed';
    row.reason =
      errors.mismatches > 0 ? `${errors.mismatches} missing cells not restored bit for bit`
      : target.pointwise ? `max error ${errors.maxErr.toExponential(3)} > E = ${target.tol.toExponential(3)}`
      : `RMSE ${errors.rmse.toExponential(3)} > ${target.tol.toExponential(3)}`;
  }
  return row;
}

export function floorRow(field: FieldData & { id: string }, target: Target, spectra: TileSpectrum[], valid: number): Row {
  const values = oracleValues(spectra, valid * target.tol * target.tol);
  const bytes = 4 * values;
  const cells = field.rows * field.cols;
  return {
    field: field.id,
    bound: target.text,
    method: FLOOR_ID,
    status: 'floor',
    floorValues: values,
    bytes,
    ratio: bytes > 0 ? (cells * 4) / bytes : Infinity,
    bpv: (8 * bytes) / cells,
    errors: { maxErr: NaN, rmse: target.tol, psnr: 20 * Math.log10(target.range / target.tol), valid, mismatches: 0 },
  };
}
