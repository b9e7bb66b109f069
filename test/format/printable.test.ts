/**
 * printable (src/format/schema.ts), which makes names from a file safe for
 * one-line messages, against definitions from outside the project: the
 * control characters are Unicode's general category Cc (C0, DEL and C1:
 * the Unicode Standard, chapter 4.5, from memory; here the JavaScript
 * engine's own \p{Cc}), the line and paragraph separators U+2028 and
 * U+2029, and a lone surrogate is what String.prototype.isWellFormed
 * (ECMAScript 2024) refuses. Every UTF-16 code unit on its own, and in
 * text around it.
 */
import { describe, expect, it } from 'vitest';
import { printable } from '../../src/format/schema.js';

const control = /^\p{Cc}$/u;

/** What printable must escape in a string of one code unit. */
function unsafe(c: number): boolean {
  const s = String.fromCharCode(c);
  return control.test(s) || c === 0x2028 || c === 0x2029 || !(s as string & { isWellFormed(): boolean }).isWellFormed();
}

describe('printable', () => {
  it('escapes exactly the control characters, separators and lone surrogates, each as \\uXXXX, alone and inside text', () => {
    for (let c = 0; c <= 0xffff; c++) {
      const s = String.fromCharCode(c);
      const want = unsafe(c) ? `\\u${c.toString(16).padStart(4, '0')}` : s;
      expect(printable(s)).toBe(want);
      if (c % 97 === 0 || unsafe(c)) expect(printable(`field ${s} tile 3`)).toBe(`field ${want} tile 3`);
    }
  });

  it('leaves a surrogate pair (one character beyond the BMP) and plain text as they are', () => {
    expect(printable("archive field 'sst' tile 12")).toBe("archive field 'sst' tile 12");
    expect(printable('a\ud83d\ude00b')).toBe('a\ud83d\ude00b');
    expect(printable('\ude00\ud83d')).toBe('\\ude00\\ud83d');
  });
});
