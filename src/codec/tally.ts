/**
 * Running maximum and root-mean-square of absolute errors, safe from
 * overflow (scaled sum of squares, as in the LAPACK 2-norm routine) and with
 * NaN sticky: one NaN error makes the maximum and the RMSE NaN, so no bound
 * comparison can pass.
 */
export class ErrorTally {
  /** Largest error seen (NaN if any error was NaN). */
  max = 0;
  /** Number of errors added. */
  count = 0;
  private scale = 0;
  private ssq = 1;

  /** Add one absolute error. */
  add(d: number): void {
    this.count++;
    if (d !== d || this.max !== this.max) {
      this.max = NaN;
      return;
    }
    if (d > this.max) this.max = d;
    if (d === 0) return;
    if (d > this.scale) {
      const r = this.scale / d;
      this.ssq = 1 + this.ssq * r * r;
      this.scale = d;
    } else {
      const r = d / this.scale;
      this.ssq += r * r;
    }
  }

  /** Fold another tally into this one. */
  merge(o: ErrorTally): void {
    this.count += o.count;
    if (o.max !== o.max || this.max !== this.max) {
      this.max = NaN;
      return;
    }
    if (o.max > this.max) this.max = o.max;
    if (o.scale === 0) return;
    if (this.scale === 0) {
      this.scale = o.scale;
      this.ssq = o.ssq;
    } else if (o.scale > this.scale) {
      const r = this.scale / o.scale;
      this.ssq = o.ssq + this.ssq * r * r;
      this.scale = o.scale;
    } else {
      const r = o.scale / this.scale;
      this.ssq += o.ssq * r * r;
    }
  }

  /**
   * The tally's state as four numbers, [count, max, scale, ssq]: what a
   * part of a run records per tile so that its join can merge the tiles'
   * tallies in tile order, as a single encoding does, to the same bits.
   */
  state(): [number, number, number, number] {
    return [this.count, this.max, this.scale, this.ssq];
  }

  /** A tally restored from {@link state}. */
  static fromState(s: readonly number[]): ErrorTally {
    const t = new ErrorTally();
    [t.count, t.max, t.scale, t.ssq] = s;
    return t;
  }

  /** Root-mean-square of the errors (0 when none were added). */
  get rmse(): number {
    if (this.max !== this.max) return NaN;
    if (this.count === 0 || this.scale === 0) return 0;
    return this.scale * Math.sqrt(this.ssq / this.count);
  }
}
