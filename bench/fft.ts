/** In-place iterative radix-2 complex FFT (Cooley-Tukey), used only to synthesize the turbulence field. */

/** Transform `re`/`im` (length a power of two) in place; `inverse` uses e^{+i} and divides by n. */
export function fft(re: Float64Array, im: Float64Array, inverse = false): void {
  const n = re.length;
  if (n & (n - 1)) throw new Error(`fft length ${n} is not a power of two`);
  for (let i = 1, j = 0; i < n; i++) {
    let bit = n >> 1;
    for (; j & bit; bit >>= 1) j ^= bit;
    j ^= bit;
    if (i < j) {
      [re[i], re[j]] = [re[j], re[i]];
      [im[i], im[j]] = [im[j], im[i]];
    }
  }
  for (let len = 2; len <= n; len <<= 1) {
    const ang = ((inverse ? 2 : -2) * Math.PI) / len;
    const wr = Math.cos(ang);
    const wi = Math.sin(ang);
    for (let i = 0; i < n; i += len) {
      let cr = 1;
      let ci = 0;
      for (let k = 0; k < len / 2; k++) {
        const a = i + k;
        const b = a + len / 2;
        const tr = re[b] * cr - im[b] * ci;
        const ti = re[b] * ci + im[b] * cr;
        re[b] = re[a] - tr;
        im[b] = im[a] - ti;
        re[a] += tr;
        im[a] += ti;
        const nr = cr * wr - ci * wi;
        ci = cr * wi + ci * wr;
        cr = nr;
      }
    }
  }
  if (inverse) {
    for (let i = 0; i < n; i++) {
      re[i] /= n;
      im[i] /= n;
    }
  }
}

/** 2-D transform of a row-major n x n complex grid: rows, then columns. */
export function fft2(re: Float64Array, im: Float64Array, n: number, inverse = false): void {
  const r = new Float64Array(n);
  const i2 = new Float64Array(n);
  for (let row = 0; row < n; row++) {
    const o = row * n;
    r.set(re.subarray(o, o + n));
    i2.set(im.subarray(o, o + n));
    fft(r, i2, inverse);
    re.set(r, o);
    im.set(i2, o);
  }
  for (let col = 0; col < n; col++) {
    for (let k = 0; k < n; k++) {
      r[k] = re[k * n + col];
      i2[k] = im[k * n + col];
    }
    fft(r, i2, inverse);
    for (let k = 0; k < n; k++) {
      re[k * n + col] = r[k];
      im[k * n + col] = i2[k];
    }
  }
}
