/**
 * The Householder reduction of a symmetric matrix to tridiagonal form
 * (src/linalg/spectrum.ts, tridiagonalize, reflector and lowerProduct),
 * after the Gram matrix in the same memory: every binary64 operation is
 * the JavaScript's, in its order (each sum of B v in increasing column
 * order, two rows a pass as the JavaScript takes them), so the same
 * diagonal and subdiagonal bit for bit.
 *
 * Memory (byte addresses, binary64): g (k x k row-major, its lower
 * triangle destroyed), d and sub (k each, out), and scratch of five
 * vectors of k (v, vNext, w, acc, col) at `work`.
 */

@inline
function at(p: usize, i: i32): usize {
  return p + (<usize>i << 3);
}

/** The last reflector's alpha and beta (see {@link reflector}). */
let alpha: f64 = 0;
let beta: f64 = 0;

/**
 * reflector() of the JavaScript over x, entries i from c + 1 at
 * src[i * stride + off]: v into `v`, alpha and beta into the globals; 0
 * (none) where x is 0, else 1.
 */
function reflector(src: usize, stride: i32, off: i32, c: i32, k: i32, v: usize): i32 {
  let norm2: f64 = 0;
  for (let i = c + 1; i < k; i++) {
    const x = load<f64>(at(src, i * stride + off));
    norm2 += x * x;
  }
  if (norm2 === 0) return 0;
  const x0 = load<f64>(at(src, (c + 1) * stride + off));
  alpha = x0 >= 0 ? -Math.sqrt(norm2) : Math.sqrt(norm2);
  for (let i = c + 1; i < k; i++) store<f64>(at(v, i), load<f64>(at(src, i * stride + off)));
  store<f64>(at(v, c + 1), x0 - alpha);
  beta = 1 / (norm2 - alpha * x0);
  return 1;
}

/** lowerProduct(g, k, from, v, w, x, acc) with w = 0 or x = 0 for none. */
function lowerProduct(g: usize, k: i32, from: i32, v: usize, w: usize, x: usize, acc: usize): void {
  let i = from;
  for (; w !== 0 && x !== 0 && i + 1 < k; i += 2) {
    const o = i * k;
    const o1 = o + k;
    const vi = load<f64>(at(v, i));
    const wi = load<f64>(at(w, i));
    const vi1 = load<f64>(at(v, i + 1));
    const wi1 = load<f64>(at(w, i + 1));
    const xi = load<f64>(at(x, i));
    const xi1 = load<f64>(at(x, i + 1));
    let s: f64 = 0;
    let s1: f64 = 0;
    for (let j = from; j < i; j++) {
      const wj = load<f64>(at(w, j));
      const vj = load<f64>(at(v, j));
      const xj = load<f64>(at(x, j));
      const y = load<f64>(at(g, o + j)) - (vi * wj + wi * vj);
      const z = load<f64>(at(g, o1 + j)) - (vi1 * wj + wi1 * vj);
      store<f64>(at(g, o + j), y);
      store<f64>(at(g, o1 + j), z);
      s += y * xj;
      s1 += z * xj;
      store<f64>(at(acc, j), load<f64>(at(acc, j)) + y * xi + z * xi1);
    }
    const y = load<f64>(at(g, o + i)) - (vi * load<f64>(at(w, i)) + wi * load<f64>(at(v, i)));
    store<f64>(at(g, o + i), y);
    store<f64>(at(acc, i), s + y * xi);
    const z = load<f64>(at(g, o1 + i)) - (vi1 * load<f64>(at(w, i)) + wi1 * load<f64>(at(v, i)));
    store<f64>(at(g, o1 + i), z);
    s1 += z * load<f64>(at(x, i));
    store<f64>(at(acc, i), load<f64>(at(acc, i)) + z * xi1);
    const zz = load<f64>(at(g, o1 + i + 1)) - (vi1 * load<f64>(at(w, i + 1)) + wi1 * load<f64>(at(v, i + 1)));
    store<f64>(at(g, o1 + i + 1), zz);
    store<f64>(at(acc, i + 1), s1 + zz * xi1);
  }
  for (; i < k; i++) {
    const o = i * k;
    if (w !== 0) {
      const vi = load<f64>(at(v, i));
      const wi = load<f64>(at(w, i));
      if (x === 0) {
        for (let j = from; j <= i; j++) store<f64>(at(g, o + j), load<f64>(at(g, o + j)) - (vi * load<f64>(at(w, j)) + wi * load<f64>(at(v, j))));
        continue;
      }
      const xi = load<f64>(at(x, i));
      let s: f64 = 0;
      for (let j = from; j < i; j++) {
        const y = load<f64>(at(g, o + j)) - (vi * load<f64>(at(w, j)) + wi * load<f64>(at(v, j)));
        store<f64>(at(g, o + j), y);
        s += y * load<f64>(at(x, j));
        store<f64>(at(acc, j), load<f64>(at(acc, j)) + y * xi);
      }
      const y = load<f64>(at(g, o + i)) - (vi * load<f64>(at(w, i)) + wi * load<f64>(at(v, i)));
      store<f64>(at(g, o + i), y);
      store<f64>(at(acc, i), s + y * xi);
      continue;
    }
    if (x === 0) continue;
    const xi = load<f64>(at(x, i));
    let s: f64 = 0;
    for (let j = from; j < i; j++) {
      const y = load<f64>(at(g, o + j));
      s += y * load<f64>(at(x, j));
      store<f64>(at(acc, j), load<f64>(at(acc, j)) + y * xi);
    }
    store<f64>(at(acc, i), s + load<f64>(at(g, o + i)) * xi);
  }
}

export function tridiagonalize(g: usize, k: i32, d: usize, sub: usize, work: usize): void {
  let v = work;
  let vNext = at(work, k);
  const w = at(work, 2 * k);
  const acc = at(work, 3 * k);
  const col = at(work, 4 * k);
  let ready = false;
  // The current step's reflector (step: 0 for none) and its alpha and beta.
  let step = k >= 3 ? reflector(g, k, 0, 0, k, v) : 0;
  let alphaNow = alpha;
  let betaNow = beta;
  for (let c = 0; c < k - 2; c++) {
    if (step === 0) {
      store<f64>(at(sub, c), 0);
      ready = false;
      if (c + 1 < k - 2) {
        step = reflector(g, k, c + 1, c + 1, k, v);
        alphaNow = alpha;
        betaNow = beta;
      }
      continue;
    }
    if (!ready) lowerProduct(g, k, c + 1, v, 0, v, acc);
    let pv: f64 = 0;
    for (let i = c + 1; i < k; i++) {
      const wi = betaNow * load<f64>(at(acc, i));
      store<f64>(at(w, i), wi);
      pv += wi * load<f64>(at(v, i));
    }
    const half = (betaNow * pv) / 2;
    for (let i = c + 1; i < k; i++) store<f64>(at(w, i), load<f64>(at(w, i)) - half * load<f64>(at(v, i)));
    let next = 0;
    const c1 = c + 1;
    const vc1 = load<f64>(at(v, c1));
    const wc1 = load<f64>(at(w, c1));
    if (c1 < k - 2) {
      for (let i = c1 + 1; i < k; i++) store<f64>(at(col, i), load<f64>(at(g, i * k + c1)) - (load<f64>(at(v, i)) * wc1 + load<f64>(at(w, i)) * vc1));
      next = reflector(col, 1, 0, c1, k, vNext);
    }
    for (let i = c1; i < k; i++) store<f64>(at(g, i * k + c1), load<f64>(at(g, i * k + c1)) - (load<f64>(at(v, i)) * wc1 + load<f64>(at(w, i)) * vc1));
    lowerProduct(g, k, c + 2, v, w, next === 0 ? 0 : vNext, acc);
    store<f64>(at(sub, c), alphaNow);
    step = next;
    alphaNow = alpha;
    betaNow = beta;
    ready = next !== 0;
    const t = v;
    v = vNext;
    vNext = t;
  }
  for (let i = 0; i < k; i++) store<f64>(at(d, i), load<f64>(at(g, i * k + i)));
  if (k >= 2) store<f64>(at(sub, k - 2), load<f64>(at(g, (k - 1) * k + k - 2)));
  store<f64>(at(sub, k - 1), 0);
}
