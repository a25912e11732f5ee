/** Montage layout and the label font (our own 5×7 glyphs). */
import { describe, expect, it } from "vitest";
import { drawText, glyphPixel, montage, textWidth, GLYPH_ADVANCE } from "../src/report/montage.js";

describe("montage", () => {
  it("the glyph of '1' has its stem in column 2 on rows 1–5 and a foot across row 6", () => {
    for (let r = 1; r <= 5; r++) expect(glyphPixel("1", r, 2)).toBe(true);
    expect([0, 1, 2, 3, 4].map((c) => glyphPixel("1", 6, c))).toEqual([false, true, true, true, false]);
    expect(glyphPixel(" ", 3, 2)).toBe(false);
    // a character without a glyph is drawn as "?", an upper-case one without a glyph as its lower case
    expect([...Array(35).keys()].map((i) => glyphPixel("€", Math.floor(i / 5), i % 5))).toEqual([...Array(35).keys()].map((i) => glyphPixel("?", Math.floor(i / 5), i % 5)));
    expect(glyphPixel("M", 3, 0)).toBe(glyphPixel("m", 3, 0));
  });

  it("drawText writes the level only where glyphs are set, advancing 6 px per character, clipped at the edges", () => {
    const w = 20, h = 9;
    const plane = new Float64Array(w * h);
    drawText(plane, w, h, 1, 1, "11", 0.7);
    expect(textWidth("11")).toBe(2 * GLYPH_ADVANCE - 1);
    expect(plane[(1 + 3) * w + 1 + 2]).toBe(0.7); // stem of the first 1
    expect(plane[(1 + 3) * w + 1 + GLYPH_ADVANCE + 2]).toBe(0.7); // stem of the second
    expect(plane[(1 + 3) * w + 1]).toBe(0);
    expect(() => drawText(plane, w, h, 17, 5, "888")).not.toThrow();
  });

  it("places tiles in columns, scales by nearest neighbour into the box, and crosses a missing tile", () => {
    const t = { values: Float64Array.from([0, 1, 1, 0]), width: 2, height: 2, labels: ["a"] };
    const m = montage([t, { values: null, width: 1, height: 1, labels: ["b"] }, t], 2, 8);
    expect(m.width).toBe(2 * m.cell.width);
    expect(m.height).toBe(2 * m.cell.height);
    const bx = Math.floor((m.cell.width - 2 - 8) / 2), by = m.cell.band;
    // tile 0: 2×2 scaled ×4: top-left quarter 0, top-right quarter 1
    expect(m.values[(by + 1) * m.width + bx + 1]).toBe(0);
    expect(m.values[(by + 1) * m.width + bx + 6]).toBe(1);
    expect(m.values[(by + 6) * m.width + bx + 1]).toBe(1);
    // tile 1 (missing): the diagonal is drawn
    const x1 = m.cell.width + bx;
    expect(m.values[(by + 3) * m.width + x1 + 3]).toBe(0.5);
    // tile 2 starts the second row
    expect(m.values[(m.cell.height + by + 1) * m.width + bx + 6]).toBe(1);
  });
});
