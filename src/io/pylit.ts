/**
 * A small, strict parser for the subset of Python literal syntax that
 * appears in .npy headers: dicts with string keys, strings, integers,
 * True/False/None, tuples and lists. It evaluates nothing; anything outside
 * that subset (expressions, escapes, comments, floats) is refused.
 */

import { InputCode, InputError } from '../errors.js';

/** A parsed literal. `start`/`end` locate its source text for messages. */
export type PyValue = (
  | { kind: 'str'; value: string }
  | { kind: 'int'; value: bigint }
  | { kind: 'bool'; value: boolean }
  | { kind: 'none' }
  | { kind: 'tuple' | 'list'; items: PyValue[] }
  | { kind: 'dict'; entries: Array<{ key: string; keyStart: number; value: PyValue }> }
) & { start: number; end: number };

/** Options of {@link parsePyLiteral}. */
export interface PyLiteralOptions {
  /** Accept a Python 2 long suffix `L` on integers (old .npy writers). */
  allowLongSuffix?: boolean;
}

/** Deepest nesting accepted; .npy headers nest a few levels at most. */
const MAX_DEPTH = 32;
const WS = ' \t\r\n\f';

/**
 * Parses `text` as one Python literal followed only by whitespace. Throws
 * InputError File, prefixed by `where`, naming the offset and what was
 * expected there.
 */
export function parsePyLiteral(text: string, where: string, options: PyLiteralOptions = {}): PyValue {
  let pos = 0;

  function fail(what: string, at = pos): never {
    const found = at >= text.length ? 'end of header' : JSON.stringify(text.slice(at, at + 12));
    throw new InputError(InputCode.File, `${where}: malformed header: ${what} at offset ${at}, found ${found}`);
  }
  const skipWs = (): void => {
    while (pos < text.length && WS.includes(text[pos]!)) pos++;
  };

  const parseString = (): PyValue & { kind: 'str' } => {
    const start = pos;
    const quote = text[pos++]!;
    let value = '';
    for (;;) {
      if (pos >= text.length) fail('unterminated string', start);
      const ch = text[pos]!;
      if (ch === quote) break;
      if (ch === '\\') fail('escape sequences are not supported in strings');
      if (ch === '\n' || ch === '\r') fail('line break inside string');
      value += ch;
      pos++;
    }
    pos++;
    return { kind: 'str', value, start, end: pos };
  };

  const parseInt = (): PyValue => {
    const start = pos;
    if (text[pos] === '-') pos++;
    const digitsStart = pos;
    while (pos < text.length && text[pos]! >= '0' && text[pos]! <= '9') pos++;
    const digits = text.slice(digitsStart, pos);
    if (digits.length === 0) fail('expected digits', digitsStart);
    if (digits.length > 1 && digits[0] === '0') fail('integer with leading zero', digitsStart);
    if (options.allowLongSuffix && text[pos] === 'L') pos++;
    if (pos < text.length && /[A-Za-z0-9_.]/.test(text[pos]!)) fail('only plain decimal integers are supported');
    const value = BigInt(digits);
    return { kind: 'int', value: text[start] === '-' ? -value : value, start, end: pos };
  };

  const parseName = (): PyValue => {
    const start = pos;
    while (pos < text.length && /[A-Za-z0-9_]/.test(text[pos]!)) pos++;
    const word = text.slice(start, pos);
    if (word === 'True' || word === 'False') return { kind: 'bool', value: word === 'True', start, end: pos };
    if (word === 'None') return { kind: 'none', start, end: pos };
    return fail('expected a literal (string, integer, True, False, None, tuple, list or dict)', start);
  };

  /** Items up to `close`, comma separated, trailing comma allowed. */
  const parseItems = (close: string, depth: number): { items: PyValue[]; sawComma: boolean } => {
    const items: PyValue[] = [];
    let sawComma = false;
    skipWs();
    while (text[pos] !== close) {
      items.push(parseValue(depth + 1));
      skipWs();
      if (text[pos] === ',') {
        sawComma = true;
        pos++;
        skipWs();
      } else if (text[pos] !== close) {
        fail(`expected ',' or '${close}'`);
      }
    }
    pos++;
    return { items, sawComma };
  };

  const parseDict = (depth: number): PyValue => {
    const start = pos++;
    const entries: Array<{ key: string; keyStart: number; value: PyValue }> = [];
    skipWs();
    while (text[pos] !== '}') {
      const keyStart = pos;
      if (text[pos] !== "'" && text[pos] !== '"') fail("expected a string key or '}'");
      const key = parseString();
      skipWs();
      if (text[pos] !== ':') fail("expected ':' after dict key");
      pos++;
      skipWs();
      entries.push({ key: key.value, keyStart, value: parseValue(depth + 1) });
      skipWs();
      if (text[pos] === ',') {
        pos++;
        skipWs();
      } else if (text[pos] !== '}') {
        fail("expected ',' or '}'");
      }
    }
    pos++;
    return { kind: 'dict', entries, start, end: pos };
  };

  function parseValue(depth: number): PyValue {
    if (depth > MAX_DEPTH) fail(`nesting deeper than ${MAX_DEPTH} levels`);
    skipWs();
    const ch = text[pos];
    const start = pos;
    if (ch === undefined) return fail('expected a value');
    if (ch === "'" || ch === '"') return parseString();
    if (ch === '-' || (ch >= '0' && ch <= '9')) return parseInt();
    if (/[A-Za-z_]/.test(ch)) return parseName();
    if (ch === '{') return parseDict(depth);
    if (ch === '[') {
      pos++;
      const { items } = parseItems(']', depth);
      return { kind: 'list', items, start, end: pos };
    }
    if (ch === '(') {
      pos++;
      const { items, sawComma } = parseItems(')', depth);
      // "(x)" is just x in parentheses; a tuple needs a comma unless empty.
      if (items.length === 1 && !sawComma) return { ...items[0]!, start, end: pos };
      return { kind: 'tuple', items, start, end: pos };
    }
    return fail('expected a value');
  }

  skipWs();
  if (pos >= text.length) {
    throw new InputError(InputCode.File, `${where}: malformed header: it holds only whitespace, no dict`);
  }
  const value = parseValue(0);
  skipWs();
  if (pos < text.length) fail('unexpected text after the literal');
  return value;
}

/** Renders `v` back as Python literal syntax, shortened for messages. */
export function pyRepr(source: string, v: PyValue, max = 60): string {
  const s = source.slice(v.start, v.end);
  return s.length > max ? `${s.slice(0, max)}...` : s;
}
