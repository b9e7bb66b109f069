/** The field layer block of RESULTS.md (written by bench/layer.ts; `npm run bench` carries it over when it rewrites the file). */

export const LAYER_BEGIN = '<!-- layer:begin (written by bench/layer.ts) -->';
export const LAYER_END = '<!-- layer:end -->';

/** The layer block of `text` (markers included), or null when it has none. */
export function layerBlock(text: string): string | null {
  const a = text.indexOf(LAYER_BEGIN);
  const b = text.indexOf(LAYER_END);
  return a >= 0 && b > a ? text.slice(a, b + LAYER_END.length) : null;
}

/** `text` with its layer block replaced by `block`, or `block` appended when it has none. */
export function withBlock(text: string, block: string): string {
  const a = text.indexOf(LAYER_BEGIN);
  const b = text.indexOf(LAYER_END);
  if (a >= 0 && b > a) return text.slice(0, a) + block + text.slice(b + LAYER_END.length);
  return `${text.trimEnd()}\n\n${block}\n`;
}
