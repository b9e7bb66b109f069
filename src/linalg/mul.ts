/**
 * The product of the randomized range finder in JavaScript: the fallback of
 * the WebAssembly kernel (kernels/product.ts), which gives the same bits.
 */

/**
 * y = w g, with w row-major rows x cols and g, y column-major (cols x l,
 * rows x l): every entry of y is a contiguous dot product. Blocks of four
 * columns of g by two rows of w, so each load feeds several products.
 */
export function mulA(w: Float64Array, rows: number, cols: number, g: Float64Array, l: number, y: Float64Array): void {
  let c = 0;
  for (; c + 3 < l; c += 4) {
    const g0 = c * cols;
    const g1 = g0 + cols;
    const g2 = g1 + cols;
    const g3 = g2 + cols;
    const y0 = c * rows;
    const y1 = y0 + rows;
    const y2 = y1 + rows;
    const y3 = y2 + rows;
    let i = 0;
    for (; i + 1 < rows; i += 2) {
      const ro = i * cols;
      const rp = ro + cols;
      let s0 = 0;
      let s1 = 0;
      let s2 = 0;
      let s3 = 0;
      let t0 = 0;
      let t1 = 0;
      let t2 = 0;
      let t3 = 0;
      for (let j = 0; j < cols; j++) {
        const x = w[ro + j];
        const z = w[rp + j];
        const a0 = g[g0 + j];
        const a1 = g[g1 + j];
        const a2 = g[g2 + j];
        const a3 = g[g3 + j];
        s0 += x * a0;
        s1 += x * a1;
        s2 += x * a2;
        s3 += x * a3;
        t0 += z * a0;
        t1 += z * a1;
        t2 += z * a2;
        t3 += z * a3;
      }
      y[y0 + i] = s0;
      y[y1 + i] = s1;
      y[y2 + i] = s2;
      y[y3 + i] = s3;
      y[y0 + i + 1] = t0;
      y[y1 + i + 1] = t1;
      y[y2 + i + 1] = t2;
      y[y3 + i + 1] = t3;
    }
    if (i < rows) {
      const ro = i * cols;
      let s0 = 0;
      let s1 = 0;
      let s2 = 0;
      let s3 = 0;
      for (let j = 0; j < cols; j++) {
        const x = w[ro + j];
        s0 += x * g[g0 + j];
        s1 += x * g[g1 + j];
        s2 += x * g[g2 + j];
        s3 += x * g[g3 + j];
      }
      y[y0 + i] = s0;
      y[y1 + i] = s1;
      y[y2 + i] = s2;
      y[y3 + i] = s3;
    }
  }
  for (; c < l; c++) {
    const g0 = c * cols;
    const y0 = c * rows;
    for (let i = 0; i < rows; i++) {
      const ro = i * cols;
      let s0 = 0;
      for (let j = 0; j < cols; j++) s0 += w[ro + j] * g[g0 + j];
      y[y0 + i] = s0;
    }
  }
}
