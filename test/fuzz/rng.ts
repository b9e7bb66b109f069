/**
 * A small seeded generator (sfc32, a public-domain "small fast counter"
 * generator, from memory) so that every fuzz case can be replayed from its
 * seed and number alone.
 */
export class Rng {
  private a: number;
  private b: number;
  private c: number;
  private d: number;

  constructor(seed: number, stream = 0) {
    this.a = 0x9e3779b9 ^ seed;
    this.b = 0x243f6a88 ^ stream;
    this.c = 0xb7e15162;
    this.d = 1;
    for (let i = 0; i < 15; i++) this.u32();
  }

  /** A uniform 32-bit unsigned integer. */
  u32(): number {
    const t = (((this.a + this.b) | 0) + this.d) | 0;
    this.d = (this.d + 1) | 0;
    this.a = this.b ^ (this.b >>> 9);
    this.b = (this.c + (this.c << 3)) | 0;
    this.c = (this.c << 21) | (this.c >>> 11);
    this.c = (this.c + t) | 0;
    return t >>> 0;
  }

  /** Uniform in [0, 1). */
  next(): number {
    return this.u32() / 4294967296;
  }

  /** Uniform integer in [0, n). */
  int(n: number): number {
    return Math.floor(this.next() * n);
  }

  /** Uniform integer in [lo, hi]. */
  range(lo: number, hi: number): number {
    return lo + this.int(hi - lo + 1);
  }

  /** True with probability p. */
  chance(p: number): boolean {
    return this.next() < p;
  }

  pick<T>(items: readonly T[]): T {
    return items[this.int(items.length)];
  }

  /** Pick by weight: [weight, value] pairs. */
  weighted<T>(items: readonly (readonly [number, T])[]): T {
    let total = 0;
    for (const [w] of items) total += w;
    let x = this.next() * total;
    for (const [w, v] of items) {
      if ((x -= w) < 0) return v;
    }
    return items[items.length - 1][1];
  }
}
