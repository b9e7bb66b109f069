/** An RGB raster with the few drawing operations pictures need, encoded as PNG by fast-png. */
import { encode } from 'fast-png';
import type { Rgb } from './colormap.js';
import { glyph, GLYPH_H, GLYPH_W } from './font.js';

export const WHITE: Rgb = [255, 255, 255];
export const BLACK: Rgb = [0, 0, 0];

/** Pixels of RGB, row-major from the top-left. */
export class Raster {
  readonly data: Uint8Array;

  constructor(
    readonly width: number,
    readonly height: number,
    background: Rgb = WHITE,
  ) {
    this.data = new Uint8Array(width * height * 3);
    for (let i = 0; i < width * height; i++) this.data.set(background, i * 3);
  }

  /** Set one pixel (outside the raster: nothing). */
  set(x: number, y: number, c: Rgb): void {
    if (x < 0 || y < 0 || x >= this.width || y >= this.height) return;
    const at = (y * this.width + x) * 3;
    this.data[at] = c[0];
    this.data[at + 1] = c[1];
    this.data[at + 2] = c[2];
  }

  /** The colour of one pixel. */
  get(x: number, y: number): Rgb {
    const at = (y * this.width + x) * 3;
    return [this.data[at], this.data[at + 1], this.data[at + 2]];
  }

  /** Fill the box [x0, x1) x [y0, y1). */
  fill(x0: number, y0: number, x1: number, y1: number, c: Rgb): void {
    for (let y = y0; y < y1; y++) for (let x = x0; x < x1; x++) this.set(x, y, c);
  }

  /** A one-pixel frame around the box [x0, x1) x [y0, y1). */
  frame(x0: number, y0: number, x1: number, y1: number, c: Rgb): void {
    for (let x = x0 - 1; x <= x1; x++) {
      this.set(x, y0 - 1, c);
      this.set(x, y1, c);
    }
    for (let y = y0 - 1; y <= y1; y++) {
      this.set(x0 - 1, y, c);
      this.set(x1, y, c);
    }
  }

  /** Width in pixels of `text` at `scale` (each font cell scale x scale pixels, one cell between glyphs). */
  static textWidth(text: string, scale: number): number {
    return text.length === 0 ? 0 : (text.length * (GLYPH_W + 1) - 1) * scale;
  }

  /** Height of a line of text at `scale`, with room for descenders. */
  static lineHeight(scale: number): number {
    return (GLYPH_H + 4) * scale;
  }

  /** Text with its top-left at (x, y). */
  text(x: number, y: number, text: string, c: Rgb, scale = 2): void {
    let pen = 0;
    for (const ch of text) {
      const cells = glyph(ch);
      const rows = cells.length / GLYPH_W;
      for (let gy = 0; gy < rows; gy++) {
        for (let gx = 0; gx < GLYPH_W; gx++) {
          if (cells[gy * GLYPH_W + gx]) this.fill(x + (pen + gx) * scale, y + gy * scale, x + (pen + gx + 1) * scale, y + (gy + 1) * scale, c);
        }
      }
      pen += GLYPH_W + 1;
    }
  }

  /** The raster as PNG bytes (8-bit RGB). */
  png(): Uint8Array {
    return encode({ width: this.width, height: this.height, data: this.data, channels: 3, depth: 8 });
  }
}

/** Break text at spaces into lines of at most `width` characters (a longer word stays whole). */
export function wrap(text: string, width: number): string[] {
  const lines: string[] = [];
  let line = '';
  for (const word of text.split(' ')) {
    if (line && line.length + 1 + word.length > width) {
      lines.push(line);
      line = word;
    } else line = line ? `${line} ${word}` : word;
  }
  if (line) lines.push(line);
  return lines;
}
