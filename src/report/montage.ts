/**
 * A montage of labelled tiles as grey values (0…1), and the small bitmap font
 * that writes the labels: 5×7 glyphs of our own design (digits, lower-case
 * letters, H and T, and the signs used in protocol values), one pixel
 * between characters. Characters without a glyph fall back to their lower
 * case, then to "?".
 */

/** Glyph bits, row-major from the top-left, 35 bits (bit 34 = row 0, column 0). */
const GLYPHS = new Map<string, number>([
  ['0', 0x3a33ae62e],
  ['1', 0x11842108e],
  ['2', 0x3a211111f],
  ['3', 0x78217043e],
  ['4', 0x08ca97c42],
  ['5', 0x7e1e0862e],
  ['6', 0x1910f462e],
  ['7', 0x7c2222108],
  ['8', 0x3a317462e],
  ['9', 0x3a317844c],
  ['a', 0x000e0be2f],
  ['b', 0x4216cc63e],
  ['c', 0x000e8422e],
  ['d', 0x042d9c62f],
  ['e', 0x000e8fe0e],
  ['f', 0x1928e2108],
  ['g', 0x01f18bc2e],
  ['h', 0x4216cc631],
  ['i', 0x100c2108e],
  ['j', 0x080610a4c],
  ['k', 0x4212a6292],
  ['l', 0x30842108e],
  ['m', 0x001aad631],
  ['n', 0x0016cc631],
  ['o', 0x000e8c62e],
  ['p', 0x001e8fa10],
  ['q', 0x000d9bc21],
  ['r', 0x0016cc210],
  ['s', 0x000e8383e],
  ['t', 0x211c42126],
  ['u', 0x00118c66d],
  ['v', 0x00118c544],
  ['w', 0x00118d6aa],
  ['x', 0x001151151],
  ['y', 0x00118bc2e],
  ['z', 0x001f1111f],
  ['H', 0x4631fc631],
  ['T', 0x7c8421084],
  ['.', 0x00000018c],
  ['-', 0x000070000],
  ['=', 0x001f07c00],
  ['/', 0x002222200],
  [':', 0x018c03180],
  [',', 0x000003088],
  ['(', 0x088842082],
  [')', 0x208210888],
  ['+', 0x0084f9080],
  ['%', 0x632222263],
  ['#', 0x295f57d4a],
  ['×', 0x022a22a20],
  ['°', 0x324c00000],
  ['±', 0x109f2101f],
  ['?', 0x3a2111004],
  [" ", 0],
]);

export const GLYPH_W = 5, GLYPH_H = 7, GLYPH_ADVANCE = 6;

function glyph(ch: string): number {
  return GLYPHS.get(ch) ?? GLYPHS.get(ch.toLowerCase()) ?? GLYPHS.get("?")!;
}

/** Width in pixels of a text line. */
export function textWidth(text: string): number {
  return text.length === 0 ? 0 : [...text].length * GLYPH_ADVANCE - 1;
}

/** Whether glyph pixel (row, col) of a character is set. */
export function glyphPixel(ch: string, row: number, col: number): boolean {
  const bit = 34 - (row * GLYPH_W + col);
  return Math.floor(glyph(ch) / 2 ** bit) % 2 === 1;
}

/** Draws text into a grey plane (row-major, width w) at (x, y) with the given level; clipped at the edges. */
export function drawText(plane: Float64Array, w: number, h: number, x: number, y: number, text: string, level = 1): void {
  let cx = x;
  for (const ch of text) {
    for (let r = 0; r < GLYPH_H; r++) for (let c = 0; c < GLYPH_W; c++) {
      const px = cx + c, py = y + r;
      if (px >= 0 && px < w && py >= 0 && py < h && glyphPixel(ch, r, c)) plane[py * w + px] = level;
    }
    cx += GLYPH_ADVANCE;
  }
}

export interface Tile {
  /** Grey values 0…1, row-major, or null for a point that was not simulated. */
  values: Float64Array | null;
  width: number;
  height: number;
  /** Label lines written above the tile. */
  labels: string[];
}

/**
 * Lays tiles out in a grid of `columns` columns. Each cell is a label band
 * then a square box of `box` pixels (at least as wide as the longest label)
 * in which the tile is scaled by nearest neighbour to fit, centred. A missing
 * tile is drawn as a crossed box. Returns grey values 0…1.
 */
export function montage(tiles: Tile[], columns: number, box = 128): { values: Float64Array; width: number; height: number; cell: { width: number; height: number; band: number } } {
  const lines = Math.max(1, ...tiles.map((t) => t.labels.length));
  const longest = Math.max(0, ...tiles.flatMap((t) => t.labels.map(textWidth)));
  const cellW = Math.max(box, longest + 4) + 4;
  const band = lines * (GLYPH_H + 3) + 3;
  const cellH = band + box + 4;
  const rows = Math.ceil(tiles.length / columns);
  const W = columns * cellW, H = rows * cellH;
  const out = new Float64Array(W * H).fill(0.12);
  tiles.forEach((t, i) => {
    const x0 = (i % columns) * cellW, y0 = Math.floor(i / columns) * cellH;
    for (let y = y0; y < y0 + band - 1; y++) for (let x = x0; x < x0 + cellW - 2; x++) out[y * W + x] = 0.3;
    t.labels.forEach((l, k) => drawText(out, W, H, x0 + 3, y0 + 3 + k * (GLYPH_H + 3), l, 1));
    const bx = x0 + Math.floor((cellW - 2 - box) / 2), by = y0 + band;
    if (!t.values) {
      for (let k = 0; k < box; k++) {
        out[(by + k) * W + bx + k] = 0.5;
        out[(by + k) * W + bx + box - 1 - k] = 0.5;
      }
      return;
    }
    const s = box / Math.max(t.width, t.height);
    const tw = Math.max(1, Math.round(t.width * s)), th = Math.max(1, Math.round(t.height * s));
    const ox = bx + Math.floor((box - tw) / 2), oy = by + Math.floor((box - th) / 2);
    for (let y = 0; y < th; y++) {
      const sy = Math.min(t.height - 1, Math.floor(y / s));
      for (let x = 0; x < tw; x++) {
        const sx = Math.min(t.width - 1, Math.floor(x / s));
        out[(oy + y) * W + ox + x] = t.values[sy * t.width + sx]!;
      }
    }
  });
  return { values: out, width: W, height: H, cell: { width: cellW, height: cellH, band } };
}
