/**
 * A MessagePack writer for the fuzzer (formats from the MessagePack
 * specification, from memory: fixint, int/uint 8..64, float 32/64, fixstr,
 * str 8/16/32, bin 8/16/32, fixarray, array 16/32, fixmap, map 16/32, ext).
 * Unlike a general encoder it can also write what a valid header never
 * holds: maps with repeated or non-string keys, chosen number widths,
 * declared lengths that disagree with the data, and raw bytes.
 */

/** A map written entry by entry (keys may repeat or be non-strings). */
export class RawMap {
  constructor(readonly entries: [unknown, unknown][]) {}
}

/** Bytes inserted as they are. */
export class Raw {
  constructor(readonly bytes: Uint8Array) {}
}

/** A number written in a chosen format. */
export class Num {
  constructor(
    readonly value: number,
    readonly as: 'f32' | 'f64' | 'u8' | 'u16' | 'u32' | 'u64' | 'i8' | 'i16' | 'i32' | 'i64',
  ) {}
}

/** An array or map whose declared length is `declared`, followed by the given items only. */
export class Lying {
  constructor(
    readonly kind: 'array' | 'map' | 'str' | 'bin',
    readonly declared: number,
    readonly items: unknown[] | Uint8Array,
  ) {}
}

class Out {
  buf = new Uint8Array(256);
  len = 0;
  private room(n: number): void {
    if (this.len + n <= this.buf.length) return;
    let size = this.buf.length * 2;
    while (size < this.len + n) size *= 2;
    const next = new Uint8Array(size);
    next.set(this.buf.subarray(0, this.len));
    this.buf = next;
  }
  u8(...v: number[]): void {
    this.room(v.length);
    for (const x of v) this.buf[this.len++] = x & 0xff;
  }
  be(v: number, bytes: number): void {
    this.room(bytes);
    for (let i = bytes - 1; i >= 0; i--) this.buf[this.len++] = Math.floor(v / 2 ** (8 * i)) & 0xff;
  }
  bytes(b: Uint8Array): void {
    this.room(b.length);
    this.buf.set(b, this.len);
    this.len += b.length;
  }
}

const utf8 = new TextEncoder();

function head(o: Out, kind: 'array' | 'map' | 'str' | 'bin', n: number): void {
  if (kind === 'array') {
    if (n < 16) o.u8(0x90 + n);
    else if (n < 0x10000) o.u8(0xdc), o.be(n, 2);
    else o.u8(0xdd), o.be(n >>> 0, 4);
  } else if (kind === 'map') {
    if (n < 16) o.u8(0x80 + n);
    else if (n < 0x10000) o.u8(0xde), o.be(n, 2);
    else o.u8(0xdf), o.be(n >>> 0, 4);
  } else if (kind === 'str') {
    if (n < 32) o.u8(0xa0 + n);
    else if (n < 0x100) o.u8(0xd9, n);
    else if (n < 0x10000) o.u8(0xda), o.be(n, 2);
    else o.u8(0xdb), o.be(n >>> 0, 4);
  } else {
    if (n < 0x100) o.u8(0xc4, n);
    else if (n < 0x10000) o.u8(0xc5), o.be(n, 2);
    else o.u8(0xc6), o.be(n >>> 0, 4);
  }
}

function num(o: Out, v: number, as?: Num['as']): void {
  const f = new DataView(new ArrayBuffer(8));
  const int = (bytes: number, code: number) => {
    o.u8(code);
    if (bytes === 8) {
      // Two's complement in 64 bits for negatives; |v| < 2^53 here.
      const hi = Math.floor(v / 2 ** 32);
      const lo = v - hi * 2 ** 32;
      o.be(hi >>> 0, 4);
      o.be(lo >>> 0, 4);
    } else o.be(v < 0 ? v + 2 ** (8 * bytes) : v, bytes);
  };
  switch (as) {
    case 'f32':
      f.setFloat32(0, v);
      o.u8(0xca);
      o.bytes(new Uint8Array(f.buffer, 0, 4));
      return;
    case 'f64':
      f.setFloat64(0, v);
      o.u8(0xcb);
      o.bytes(new Uint8Array(f.buffer, 0, 8));
      return;
    case 'u8':
      return int(1, 0xcc);
    case 'u16':
      return int(2, 0xcd);
    case 'u32':
      return int(4, 0xce);
    case 'u64':
      return int(8, 0xcf);
    case 'i8':
      return int(1, 0xd0);
    case 'i16':
      return int(2, 0xd1);
    case 'i32':
      return int(4, 0xd2);
    case 'i64':
      return int(8, 0xd3);
  }
  if (Number.isSafeInteger(v) && !Object.is(v, -0)) {
    if (v >= 0 && v < 128) return o.u8(v);
    if (v < 0 && v >= -32) return o.u8(0x100 + v);
    if (v >= 0) return v < 0x100 ? int(1, 0xcc) : v < 0x10000 ? int(2, 0xcd) : v < 2 ** 32 ? int(4, 0xce) : int(8, 0xcf);
    return v >= -128 ? int(1, 0xd0) : v >= -32768 ? int(2, 0xd1) : v >= -(2 ** 31) ? int(4, 0xd2) : int(8, 0xd3);
  }
  num(o, v, 'f64');
}

function write(o: Out, v: unknown): void {
  if (v === null || v === undefined) o.u8(0xc0);
  else if (v === false) o.u8(0xc2);
  else if (v === true) o.u8(0xc3);
  else if (typeof v === 'number') num(o, v);
  else if (typeof v === 'string') {
    const b = utf8.encode(v);
    head(o, 'str', b.length);
    o.bytes(b);
  } else if (v instanceof Uint8Array) {
    head(o, 'bin', v.length);
    o.bytes(v);
  } else if (v instanceof Num) num(o, v.value, v.as);
  else if (v instanceof Raw) o.bytes(v.bytes);
  else if (v instanceof RawMap) {
    head(o, 'map', v.entries.length);
    for (const [k, x] of v.entries) write(o, k), write(o, x);
  } else if (v instanceof Lying) {
    head(o, v.kind, v.declared);
    if (v.items instanceof Uint8Array) o.bytes(v.items);
    else for (const x of v.items) write(o, x);
  } else if (Array.isArray(v)) {
    head(o, 'array', v.length);
    for (const x of v) write(o, x);
  } else if (typeof v === 'object') {
    const entries = Object.entries(v as object);
    head(o, 'map', entries.length);
    for (const [k, x] of entries) write(o, k), write(o, x);
  } else throw new Error(`cannot write ${typeof v}`);
}

/** Encode a value (with the special nodes above) as MessagePack bytes. */
export function encodeValue(v: unknown): Uint8Array {
  const o = new Out();
  write(o, v);
  return o.buf.slice(0, o.len);
}
