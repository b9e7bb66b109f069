/**
 * The command line's wording of the fill-value guard (src/codec/fill-guard.ts):
 * a suspect value is refused with one line suggesting `--fill V` (it marks
 * missing cells) or `--no-fill` (it is data).
 */
import { shortest, type Suspect } from '../codec/fill-guard.js';

export { HUGE, RangeWatch, shortest, type Suspect } from '../codec/fill-guard.js';

/** The one-line refusal for a suspect value of `what` ("'x.npy'", "variable 'sst' of 'run.nc'"). */
export function suspectMessage(s: Suspect, what: string, f32: boolean): string {
  const v = shortest(s.value, f32);
  const rest = s.rest ? `the other values lie in ${shortest(s.rest[0], f32)} .. ${shortest(s.rest[1], f32)}` : 'no other valid values';
  const why = s.huge ? `of magnitude 1e30 or more` : 'far outside the rest';
  return (
    `${what}: ${s.count} cell${s.count === 1 ? '' : 's'} hold ${v}, ${why} (${rest}); as data it would set the field's range and with it what the bound allows. ` +
    `If it marks missing cells, give --fill ${v}; to pack it as data, give --no-fill`
  );
}
