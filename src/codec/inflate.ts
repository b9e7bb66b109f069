/**
 * A strict decoder of raw DEFLATE streams (RFC 1951) for compressed
 * sections. Unlike a general-purpose inflater it writes into a buffer of
 * exactly the declared size and stops at the first byte that would not fit,
 * and it refuses what a section may not hold: bytes after the final block,
 * over-subscribed or incomplete Huffman codes, reserved block types and
 * symbols, and distances reaching before the start of the output. Its work
 * is linear in the stored bytes plus the output, whatever the input.
 *
 * Pure TypeScript over typed arrays, so it runs in browsers as well as Node.
 */

/** Why a stream was refused; `at` is the offset in the stored bytes where it was noticed. */
export class InflateError extends Error {
  readonly at: number;
  /** 'invalid' (not DEFLATE), 'overflow' (more than the output holds), 'short' (fewer), 'trailing' (bytes after the end). */
  readonly kind: 'invalid' | 'overflow' | 'short' | 'trailing';
  /** Bytes produced when the stream was refused. */
  readonly produced: number;
  constructor(kind: InflateError['kind'], message: string, at: number, produced: number) {
    super(message);
    this.name = 'InflateError';
    this.kind = kind;
    this.at = at;
    this.produced = produced;
  }
}

/** Largest code length DEFLATE allows. */
const MAX_BITS = 15;
/** Bits resolved by one table lookup; longer codes take the bit-by-bit path. */
const LIT_FAST = 10;
const DIST_FAST = 8;

// RFC 1951, section 3.2.5: base lengths and extra bits of length codes 257..285,
// base distances and extra bits of distance codes 0..29.
const LEN_BASE = Uint16Array.of(3, 4, 5, 6, 7, 8, 9, 10, 11, 13, 15, 17, 19, 23, 27, 31, 35, 43, 51, 59, 67, 83, 99, 115, 131, 163, 195, 227, 258);
const LEN_EXTRA = Uint8Array.of(0, 0, 0, 0, 0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2, 3, 3, 3, 3, 4, 4, 4, 4, 5, 5, 5, 5, 0);
const DIST_BASE = Uint16Array.of(
  1, 2, 3, 4, 5, 7, 9, 13, 17, 25, 33, 49, 65, 97, 129, 193, 257, 385, 513, 769, 1025, 1537, 2049, 3073, 4097, 6145, 8193, 12289, 16385, 24577,
);
const DIST_EXTRA = Uint8Array.of(0, 0, 0, 0, 1, 1, 2, 2, 3, 3, 4, 4, 5, 5, 6, 6, 7, 7, 8, 8, 9, 9, 10, 10, 11, 11, 12, 12, 13, 13);
// RFC 1951, section 3.2.7: the order in which code length code lengths are stored.
const CL_ORDER = Uint8Array.of(16, 17, 18, 0, 8, 7, 9, 6, 10, 5, 11, 4, 12, 3, 13, 2, 14, 1, 15);

/** A canonical Huffman code: counts per length, symbols in code order, and a lookup table. */
interface Huffman {
  count: Uint16Array;
  symbol: Uint16Array;
  /** Indexed by the next `bits` stream bits: (symbol << 4) | length, or 0 for "longer, or no such code". */
  fast: Int32Array;
  bits: number;
}

/** Reverse the low `len` bits of `code` (Huffman codes are packed starting with their most significant bit). */
function reverse(code: number, len: number): number {
  let r = 0;
  for (let i = 0; i < len; i++) {
    r = (r << 1) | (code & 1);
    code >>= 1;
  }
  return r;
}

/**
 * Build a code from code lengths (0 = unused), or return a problem. As zlib
 * does, an incomplete code is refused unless it is a single code of length 1
 * (allowed for the literal/length and distance codes), and a code with no
 * symbols at all is kept, failing only if a symbol is decoded from it.
 */
function build(lengths: Uint8Array, fastBits: number, allowSingle: boolean): Huffman | string {
  const count = new Uint16Array(MAX_BITS + 1);
  for (let s = 0; s < lengths.length; s++) count[lengths[s]]++;
  count[0] = 0;
  let left = 1;
  let maxLen = 0;
  let used = 0;
  for (let len = 1; len <= MAX_BITS; len++) {
    left = (left << 1) - count[len];
    if (left < 0) return 'over-subscribed Huffman code';
    if (count[len] > 0) maxLen = len;
    used += count[len];
  }
  if (left > 0 && used > 0 && !(allowSingle && used === 1 && maxLen === 1)) return 'incomplete Huffman code';
  const offs = new Uint16Array(MAX_BITS + 2);
  for (let len = 1; len <= MAX_BITS; len++) offs[len + 1] = offs[len] + count[len];
  const symbol = new Uint16Array(Math.max(1, used));
  for (let s = 0; s < lengths.length; s++) if (lengths[s] !== 0) symbol[offs[lengths[s]]++] = s;
  const bits = Math.max(1, Math.min(fastBits, maxLen));
  const size = 1 << bits;
  const fast = new Int32Array(size);
  let code = 0;
  let k = 0;
  for (let len = 1; len <= maxLen; len++) {
    for (let c = 0; c < count[len]; c++, code++) {
      const sym = symbol[k++];
      if (len > bits) continue;
      for (let f = reverse(code, len); f < size; f += 1 << len) fast[f] = (sym << 4) | len;
    }
    code <<= 1;
  }
  return { count, symbol, fast, bits };
}

function codeOrThrow(h: Huffman | string, what: string, at: number, produced: number): Huffman {
  if (typeof h === 'string') throw new InflateError('invalid', `${what}: ${h}`, at, produced);
  return h;
}

let fixedLit: Huffman | null = null;
let fixedDist: Huffman | null = null;

/** The fixed codes of RFC 1951 section 3.2.6, built once. */
function fixedCodes(): [Huffman, Huffman] {
  if (!fixedLit || !fixedDist) {
    const l = new Uint8Array(288);
    l.fill(8, 0, 144);
    l.fill(9, 144, 256);
    l.fill(7, 256, 280);
    l.fill(8, 280, 288);
    fixedLit = build(l, LIT_FAST, false) as Huffman;
    fixedDist = build(new Uint8Array(30 + 2).fill(5), DIST_FAST, false) as Huffman;
  }
  return [fixedLit, fixedDist];
}

/**
 * Inflate the raw DEFLATE stream `src` into `out`, which it must fill
 * exactly: the stream must end (final block, then at most the padding bits
 * of its last byte) with `out.length` bytes produced. Throws
 * {@link InflateError} otherwise.
 */
export function inflateInto(src: Uint8Array, out: Uint8Array): void {
  const srcLen = src.length;
  const outLen = out.length;
  let pos = 0; // next byte of src to load into the bit buffer
  let bb = 0; // bit buffer, least significant bit first
  let bc = 0; // bits in bb
  let op = 0; // bytes produced

  const fail = (kind: InflateError['kind'], message: string): never => {
    throw new InflateError(kind, message, Math.max(0, pos - (bc >> 3) - 1), op);
  };
  const need = (n: number): void => {
    while (bc < n) {
      if (pos >= srcLen) fail('invalid', 'the stream ends before its final block is complete');
      bb |= src[pos++] << bc;
      bc += 8;
    }
  };
  const take = (n: number): number => {
    if (n === 0) return 0;
    need(n);
    const v = bb & ((1 << n) - 1);
    bb >>>= n;
    bc -= n;
    return v;
  };
  const decode = (h: Huffman): number => {
    // Load what is there (up to 32 bits) without failing: a short final code may need fewer bits than the table.
    while (bc <= 24 && pos < srcLen) {
      bb |= src[pos++] << bc;
      bc += 8;
    }
    const e = h.fast[bb & ((1 << h.bits) - 1)];
    if (e !== 0) {
      const len = e & 15;
      if (len > bc) fail('invalid', 'the stream ends inside a Huffman code');
      bb >>>= len;
      bc -= len;
      return e >> 4;
    }
    // A code longer than the table, or none: walk the canonical code bit by bit.
    let code = 0;
    let first = 0;
    let index = 0;
    for (let len = 1; len <= MAX_BITS; len++) {
      code |= take(1);
      const c = h.count[len];
      if (code - c < first) return h.symbol[index + (code - first)];
      index += c;
      first = (first + c) << 1;
      code <<= 1;
    }
    return fail('invalid', 'a bit sequence that is no Huffman code');
  };

  let final = 0;
  while (final === 0) {
    final = take(1);
    const type = take(2);
    if (type === 0) {
      // Stored block: skip to a byte boundary, give back whole preloaded bytes, read LEN and NLEN.
      bb >>>= bc & 7;
      bc -= bc & 7;
      pos -= bc >> 3;
      bb = 0;
      bc = 0;
      if (pos + 4 > srcLen) fail('invalid', 'the stream ends inside a stored block header');
      const len = src[pos] | (src[pos + 1] << 8);
      const nlen = src[pos + 2] | (src[pos + 3] << 8);
      if ((len ^ 0xffff) !== nlen) fail('invalid', 'a stored block length does not match its complement');
      pos += 4;
      if (pos + len > srcLen) fail('invalid', 'the stream ends inside a stored block');
      if (op + len > outLen) fail('overflow', 'more output than the declared length');
      out.set(src.subarray(pos, pos + len), op);
      op += len;
      pos += len;
      continue;
    }
    let lit: Huffman;
    let dist: Huffman;
    if (type === 1) [lit, dist] = fixedCodes();
    else if (type === 2) [lit, dist] = dynamicCodes();
    else return fail('invalid', 'reserved block type 3');
    for (;;) {
      const sym = decode(lit);
      if (sym < 256) {
        if (op >= outLen) fail('overflow', 'more output than the declared length');
        out[op++] = sym;
      } else if (sym === 256) break;
      else {
        const li = sym - 257;
        if (li >= 29) fail('invalid', `reserved length symbol ${sym}`);
        const len = LEN_BASE[li] + take(LEN_EXTRA[li]);
        const ds = decode(dist);
        if (ds >= 30) fail('invalid', `reserved distance symbol ${ds}`);
        const d = DIST_BASE[ds] + take(DIST_EXTRA[ds]);
        if (d > op) fail('invalid', `a distance of ${d} reaches before the start of the output`);
        if (op + len > outLen) fail('overflow', 'more output than the declared length');
        // Byte by byte: a match may overlap the bytes it produces.
        for (let k = 0; k < len; k++, op++) out[op] = out[op - d];
      }
    }
  }
  // Whole bytes still unread (the bit buffer may hold preloaded bytes beyond the padding).
  const rest = srcLen - pos + (bc >> 3);
  if (rest > 0) throw new InflateError('trailing', `${rest} bytes after the end of the stream`, srcLen - rest, op);
  if (op !== outLen) throw new InflateError('short', `the stream ends after ${op} bytes`, srcLen, op);

  /** Read the code lengths of a dynamic block (RFC 1951, section 3.2.7) and build its two codes. */
  function dynamicCodes(): [Huffman, Huffman] {
    const nlen = take(5) + 257;
    const ndist = take(5) + 1;
    const ncode = take(4) + 4;
    if (nlen > 286 || ndist > 30) fail('invalid', `${nlen} literal/length or ${ndist} distance codes (at most 286 and 30)`);
    const cl = new Uint8Array(19);
    for (let i = 0; i < ncode; i++) cl[CL_ORDER[i]] = take(3);
    const clCode = codeOrThrow(build(cl, 7, false), 'code length code', pos, op);
    if (clCode.symbol.length === 0 || clCode.count.every((c) => c === 0)) fail('invalid', 'an empty code length code');
    const lengths = new Uint8Array(nlen + ndist);
    for (let i = 0; i < nlen + ndist; ) {
      const sym = decode(clCode);
      if (sym < 16) {
        lengths[i++] = sym;
        continue;
      }
      let value = 0;
      let repeat: number;
      if (sym === 16) {
        if (i === 0) fail('invalid', 'a repeated code length with no length before it');
        value = lengths[i - 1];
        repeat = 3 + take(2);
      } else if (sym === 17) repeat = 3 + take(3);
      else repeat = 11 + take(7);
      if (i + repeat > nlen + ndist) fail('invalid', 'code lengths repeat past the end of the list');
      lengths.fill(value, i, i + repeat);
      i += repeat;
    }
    if (lengths[256] === 0) fail('invalid', 'a block code without the end-of-block symbol');
    const l = codeOrThrow(build(lengths.subarray(0, nlen), LIT_FAST, true), 'literal/length code', pos, op);
    const d = codeOrThrow(build(lengths.subarray(nlen), DIST_FAST, true), 'distance code', pos, op);
    return [l, d];
  }
}
