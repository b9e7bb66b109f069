/**
 * The fill-value guard of packing: a sentinel left in a field without
 * declaring it as the fill value (land cells of -1e34, a -999 that marks
 * missing cells) becomes the field's range, and a rel or psnr bound,
 * resolved against that range, then permits errors far larger than the
 * real values. {@link RangeWatch} sees the values once, band by band, and
 * names such a value:
 *  - any value of magnitude 1e30 or more (netCDF's default fill of float,
 *    9.96921e36, and the common -1e34 and 1e30 are of this kind);
 *  - or a single value at an end of the range held by many cells (at least
 *    0.1% of the valid ones, and 2), and farther from the rest of the
 *    values than 10 times their own spread (rules of thumb; common
 *    practice, no source).
 * The caller then says which it is: a fill value (missing cells) or data.
 * The library ({@link pack}, {@link ArchiveBuilder}) refuses with
 * {@link suspectError}; the command line with its own wording (--fill, --no-fill).
 */
import { InputCode, InputError } from '../errors.js';
import type { FloatArray } from '../types.js';

/** Magnitude from which a value is taken for a sentinel, whatever the rest. */
export const HUGE = 1e30;
/** Share of the valid cells a single extreme value must hold to count as a sentinel. */
const MANY = 1e-3;
/** How much farther than the spread of the rest an extreme value must lie. */
const FAR = 10;

/** A suspect value: what it is, how many cells hold it, and the range of the rest. */
export interface Suspect {
  value: number;
  count: number;
  huge: boolean;
  rest: [number, number] | null;
}

/** Extremes of a field's valid values, gathered band by band in one pass. */
export class RangeWatch {
  private valid = 0;
  private min1 = Infinity;
  private min2 = Infinity;
  private nMin = 0;
  private max1 = -Infinity;
  private max2 = -Infinity;
  private nMax = 0;
  private hugeValue = 0;
  private hugeCount = 0;
  private restLo = Infinity;
  private restHi = -Infinity;

  /** `fill`: the value already declared missing (not counted); NaN and infinities are never counted. */
  constructor(private readonly fill: number | null) {}

  add(values: FloatArray): void {
    const fill = this.fill === null ? null : values instanceof Float32Array ? Math.fround(this.fill) : this.fill;
    for (let i = 0; i < values.length; i++) {
      const x = values[i];
      if (!Number.isFinite(x) || x === fill) continue;
      if (Math.abs(x) >= HUGE) {
        if (this.hugeCount === 0 || x === this.hugeValue) {
          this.hugeValue = x;
          this.hugeCount++;
        }
        continue;
      }
      this.valid++;
      if (x < this.restLo) this.restLo = x;
      if (x > this.restHi) this.restHi = x;
      if (x < this.min1) {
        this.min2 = this.min1;
        this.min1 = x;
        this.nMin = 1;
      } else if (x === this.min1) this.nMin++;
      else if (x < this.min2) this.min2 = x;
      if (x > this.max1) {
        this.max2 = this.max1;
        this.max1 = x;
        this.nMax = 1;
      } else if (x === this.max1) this.nMax++;
      else if (x > this.max2) this.max2 = x;
    }
  }

  /**
   * The watch's state as eleven numbers (for a range pass made in parts:
   * see src/parts/plan-pieces.ts): valid, the two smallest distinct values
   * and the count of the smallest, the same at the top, the first huge
   * value and its count, and the range of the values that are not huge.
   */
  state(): number[] {
    return [this.valid, this.min1, this.min2, this.nMin, this.max1, this.max2, this.nMax, this.hugeValue, this.hugeCount, this.restLo, this.restHi];
  }

  /** A watch restored from {@link state}. */
  static fromState(fill: number | null, s: readonly number[]): RangeWatch {
    const w = new RangeWatch(fill);
    [w.valid, w.min1, w.min2, w.nMin, w.max1, w.max2, w.nMax, w.hugeValue, w.hugeCount, w.restLo, w.restHi] = s;
    return w;
  }

  /**
   * Fold in the watch of the values that follow this one's. The extremes,
   * counts and the range come out as one watch over all the values would
   * give them; so does the verdict of {@link suspect}. Of huge values, the
   * first one's count adds only where the later watch's first huge value is
   * the same, so the count a refusal gives may fall short of the field's.
   */
  merge(o: RangeWatch): void {
    this.valid += o.valid;
    if (o.restLo < this.restLo) this.restLo = o.restLo;
    if (o.restHi > this.restHi) this.restHi = o.restHi;
    // The two smallest distinct values of both, and how many hold the smallest.
    if (o.min1 < this.min1) {
      this.min2 = Math.min(this.min1, o.min2);
      [this.min1, this.nMin] = [o.min1, o.nMin];
    } else if (o.min1 === this.min1) {
      this.min2 = Math.min(this.min2, o.min2);
      this.nMin += o.nMin;
    } else this.min2 = Math.min(this.min2, o.min1);
    if (o.max1 > this.max1) {
      this.max2 = Math.max(this.max1, o.max2);
      [this.max1, this.nMax] = [o.max1, o.nMax];
    } else if (o.max1 === this.max1) {
      this.max2 = Math.max(this.max2, o.max2);
      this.nMax += o.nMax;
    } else this.max2 = Math.max(this.max2, o.max1);
    if (this.hugeCount === 0) [this.hugeValue, this.hugeCount] = [o.hugeValue, o.hugeCount];
    else if (o.hugeCount > 0 && o.hugeValue === this.hugeValue) this.hugeCount += o.hugeCount;
  }

  /** The value that looks like an undeclared fill value, or null. */
  suspect(): Suspect | null {
    if (this.hugeCount > 0) {
      return { value: this.hugeValue, count: this.hugeCount, huge: true, rest: this.valid > 0 ? [this.restLo, this.restHi] : null };
    }
    const many = Math.max(2, MANY * this.valid);
    const low = this.nMin >= many && this.max1 - this.min2 > 0 && this.min2 - this.min1 > FAR * (this.max1 - this.min2);
    const high = this.nMax >= many && this.max2 - this.min1 > 0 && this.max1 - this.max2 > FAR * (this.max2 - this.min1);
    if (!low && !high) return null;
    const atLow = low && (!high || this.nMin >= this.nMax);
    return atLow
      ? { value: this.min1, count: this.nMin, huge: false, rest: [this.min2, high ? this.max2 : this.max1] }
      : { value: this.max1, count: this.nMax, huge: false, rest: [low ? this.min2 : this.min1, this.max2] };
  }
}

/** The shortest decimal that reads back as `x` in the given type (so it can be typed as --fill). */
export function shortest(x: number, f32: boolean): string {
  if (!f32) return String(x);
  for (let p = 1; p <= 9; p++) {
    const t = Number(x.toPrecision(p));
    if (Math.fround(t) === x) return String(t);
  }
  return String(x);
}

/** The InputError (code `fill`) the library raises for a suspect value of field `name`. */
export function suspectError(s: Suspect, name: string, f32: boolean): InputError {
  const v = shortest(s.value, f32);
  const rest = s.rest ? `the other values lie in ${shortest(s.rest[0], f32)} .. ${shortest(s.rest[1], f32)}` : 'no other valid values';
  const why = s.huge ? 'of magnitude 1e30 or more' : 'far outside the rest';
  return new InputError(
    InputCode.Fill,
    `field '${name}': ${s.count} cell${s.count === 1 ? '' : 's'} hold ${v}, ${why} (${rest}); as data it would set the field's range and with it what the bound allows. ` +
      `If it marks missing cells, pass fill: ${v}; to pack it as data, pass fill: null`,
  );
}
