/**
 * The scale of a colour bar: round tick values and their labels. Pure and
 * free of Node built-ins, so the browser viewer (src/view/page.ts) labels its
 * colour bar exactly as the PNG pictures do.
 */

/** Round to 1, 2 or 5 times a power of ten. */
function nice(v: number): number {
  const p = 10 ** Math.floor(Math.log10(v));
  const f = v / p;
  return (f < 1.5 ? 1 : f < 3.5 ? 2 : f < 7.5 ? 5 : 10) * p;
}

/** About five tick values within [lo, hi], at round numbers. */
export function ticks(lo: number, hi: number, discrete = false): number[] {
  if (!(hi > lo)) return [lo];
  const step = discrete ? Math.max(1, Math.round(nice((hi - lo) / 5))) : nice((hi - lo) / 5);
  const out: number[] = [];
  for (let k = Math.ceil(lo / step - 1e-9); k * step <= hi + step * 1e-9; k++) out.push(Math.abs(k * step) < step * 1e-9 ? 0 : k * step);
  return out;
}

/** A tick label: up to 4 significant digits, exponent form when very large or small. */
export function tickLabel(v: number): string {
  if (v === 0) return '0';
  const a = Math.abs(v);
  if (a >= 1e5 || a < 1e-3) return v.toExponential(1).replace('.0e', 'e').replace('e+', 'e');
  return String(Number(v.toPrecision(4)));
}
