/**
 * Reading the JSON files of a run (plans, pieces): the text parsed, and
 * checked readers of its values, each refusing through `bad` with a line
 * that names what is wrong. Numbers JSON cannot carry exactly (-0, NaN,
 * infinities) are read from the strings plan.ts's `exact` writes.
 */

/** Checked readers of JSON values; each calls `bad` (which throws) on a value of another kind. */
export interface JsonReader {
  /** The parsed text, an object. */
  root: Record<string, unknown>;
  obj(v: unknown, what: string): Record<string, unknown>;
  num(v: unknown, what: string): number;
  int(v: unknown, what: string, min?: number): number;
  str(v: unknown, what: string): string;
  arr(v: unknown, what: string, n?: number): unknown[];
  /** Two integers of at least `min` (default 1). */
  pair(v: unknown, what: string, min?: number): [number, number];
}

const SPECIAL: Record<string, number> = { '-0': -0, NaN: NaN, Infinity: Infinity, '-Infinity': -Infinity };

/** Parse `text` (`what` names its top level in messages) and return readers of its values. */
export function readJson(text: string, what: string, bad: (why: string) => never): JsonReader {
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch {
    return bad('not JSON');
  }
  const obj = (v: unknown, w: string): Record<string, unknown> => (typeof v === 'object' && v !== null && !Array.isArray(v) ? (v as Record<string, unknown>) : bad(`${w} is not an object`));
  const num = (v: unknown, w: string): number => (typeof v === 'number' ? v : typeof v === 'string' && v in SPECIAL ? SPECIAL[v] : bad(`${w} is not a number`));
  const int = (v: unknown, w: string, min = 0): number => (typeof v === 'number' && Number.isSafeInteger(v) && v >= min ? v : bad(`${w} is not an integer of at least ${min}`));
  const str = (v: unknown, w: string): string => (typeof v === 'string' ? v : bad(`${w} is not a string`));
  const arr = (v: unknown, w: string, n?: number): unknown[] => (Array.isArray(v) && (n === undefined || v.length === n) ? v : bad(`${w} is not an array${n === undefined ? '' : ` of ${n}`}`));
  const pair = (v: unknown, w: string, min = 1): [number, number] => {
    const a = arr(v, w, 2);
    return [int(a[0], `${w}[0]`, min), int(a[1], `${w}[1]`, min)];
  };
  return { root: obj(raw, what), obj, num, int, str, arr, pair };
}
