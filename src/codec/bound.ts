/** Error bounds: parsing `MODE:VALUE` and resolving them against a field. */
import { InputCode, InputError } from '../errors.js';
import type { Bound, BoundMode } from '../types.js';

const MODES: readonly BoundMode[] = ['abs', 'rel', 'rmse', 'psnr'];

/** True for the modes that bound every value (as opposed to the root-mean-square). */
export function isPointwise(mode: BoundMode): boolean {
  return mode === 'abs' || mode === 'rel';
}

/** Parse `abs:E`, `rel:R`, `rmse:E` or `psnr:D`. */
export function parseBound(text: string): Bound {
  const m = /^([a-z]+):(.+)$/.exec(text.trim());
  if (!m) throw new InputError(InputCode.Bound, `bound '${text}' is not MODE:VALUE (modes: ${MODES.join(', ')})`);
  const mode = m[1] as BoundMode;
  if (!MODES.includes(mode)) throw new InputError(InputCode.Bound, `unknown bound mode '${m[1]}' (known: ${MODES.join(', ')})`);
  const value = Number(m[2]);
  return checkBound({ mode, value });
}

/** Refuse a bound whose value is not a positive finite number. */
export function checkBound(b: Bound): Bound {
  if (!MODES.includes(b.mode)) throw new InputError(InputCode.Bound, `unknown bound mode '${String(b.mode)}' (known: ${MODES.join(', ')})`);
  if (typeof b.value !== 'number' || !Number.isFinite(b.value) || b.value <= 0) {
    throw new InputError(InputCode.Bound, `bound value for '${b.mode}' must be a positive finite number, got ${String(b.value)}`);
  }
  return { mode: b.mode, value: b.value };
}

/** Format a bound the way it is parsed. */
export function formatBound(b: Bound): string {
  return `${b.mode}:${b.value}`;
}

/**
 * The absolute tolerance a bound means for a field whose valid values span
 * `range` (max - min): the pointwise |x - x'| limit for abs/rel, the RMSE
 * limit for rmse/psnr. PSNR is 20 log10(range / RMSE) dB.
 */
export function resolveBound(b: Bound, range: number): number {
  switch (b.mode) {
    case 'abs':
    case 'rmse':
      return b.value;
    case 'rel':
      return b.value * range;
    case 'psnr':
      return range / Math.pow(10, b.value / 20);
  }
}
