import { describe, expect, it } from "vitest";
import { PNG } from "pngjs";
import { encodeGrayPng, logMagnitude, percentile } from "../src/io/png.js";

/** Decodes a PNG and returns its size, colour type and the grey level of every pixel (red channel). */
function decode(bytes: Uint8Array): { width: number; height: number; colorType: number; grey: number[] } {
  const png = PNG.sync.read(Buffer.from(bytes));
  const grey: number[] = [];
  for (let i = 0; i < png.width * png.height; i++) grey.push(png.data[4 * i]);
  // Colour type and bit depth are bytes 25 and 24 of the file (IHDR chunk data).
  return { width: png.width, height: png.height, colorType: bytes[25], grey };
}

describe("percentile", () => {
  it("percentile interpolates linearly between order statistics like NumPy's default", () => {
    const v = Float64Array.from([3, 1, 4, 1, 5, 9, 2, 6]);
    // sorted 1 1 2 3 4 5 6 9; h = 7·p/100
    expect(percentile(v, 0)).toBe(1);
    expect(percentile(v, 100)).toBe(9);
    expect(percentile(v, 50)).toBeCloseTo(3.5, 12);
    expect(percentile(v, 90)).toBeCloseTo(6 + 0.3 * 3, 12);
  });

  it("percentile ignores NaN and infinities and returns NaN when nothing finite is left", () => {
    expect(percentile([NaN, 2, Infinity, 4, -Infinity], 100)).toBe(4);
    expect(percentile([NaN, NaN], 50)).toBeNaN();
    expect(percentile([], 50)).toBeNaN();
  });

  it("percentile does not modify its input", () => {
    const v = Float64Array.from([5, 4, 3]);
    percentile(v, 50);
    expect(Array.from(v)).toEqual([5, 4, 3]);
  });

  it("percentile throws RangeError for p outside 0..100", () => {
    expect(() => percentile([1], 101)).toThrow(RangeError);
    expect(() => percentile([1], -1)).toThrow(RangeError);
  });

  it("percentile of 10^6 values equals the value at the interpolated rank", () => {
    const n = 1_000_000;
    const v = new Float64Array(n);
    // a permutation of 0..n−1
    for (let i = 0; i < n; i++) v[i] = (i * 7919) % n;
    expect(percentile(v, 99.5)).toBeCloseTo((n - 1) * 0.995, 6);
  });
});

describe("encodeGrayPng", () => {
  it("encodeGrayPng writes an 8-bit greyscale PNG of the given width and height", () => {
    const { png } = encodeGrayPng(new Float64Array(15).fill(1), 5, 3);
    const d = decode(png);
    expect([d.width, d.height]).toEqual([5, 3]);
    expect(d.colorType).toBe(0);
    expect(png[24]).toBe(8); // bit depth
  });

  it("encodeGrayPng maps 0 to 0 and the 99.5th percentile to 255 by default", () => {
    const n = 1000;
    const values = Float64Array.from({ length: n }, (_, i) => i);
    const { png, low, high } = encodeGrayPng(values, 50, 20);
    expect(low).toBe(0);
    expect(high).toBeCloseTo(percentile(values, 99.5), 12);
    const g = decode(png).grey;
    expect(g[0]).toBe(0);
    // value i maps to round(255·i/high)
    expect(g[500]).toBe(Math.round((255 * 500) / high));
    expect(g[Math.ceil(high)]).toBe(255);
    expect(g[n - 1]).toBe(255);
    expect(g[Math.floor(high) - 2]).toBeLessThan(255);
  });

  it("encodeGrayPng puts row 0 of the values at the top of the image", () => {
    // 3 wide, 2 high: top row bright, bottom row dark; left to right increasing.
    const values = Float64Array.from([10, 20, 30, 0, 0, 0]);
    const { png } = encodeGrayPng(values, 3, 2, { high: 30 });
    const g = decode(png).grey;
    expect(g).toEqual([85, 170, 255, 0, 0, 0]);
  });

  it("encodeGrayPng uses the given low/high window and clamps outside it", () => {
    const values = Float64Array.from([-5, 0, 5, 10, 15]);
    const { png, low, high } = encodeGrayPng(values, 5, 1, { low: 0, high: 10 });
    expect([low, high]).toEqual([0, 10]);
    expect(decode(png).grey).toEqual([0, 0, 128, 255, 255]);
  });

  it("encodeGrayPng falls back to the maximum when the percentile is not above low", () => {
    // 999 zeros and one 7: the 99.5th percentile is 0, so high = max = 7.
    const values = new Float64Array(1000);
    values[123] = 7;
    const { png, high } = encodeGrayPng(values, 100, 10);
    expect(high).toBe(7);
    expect(decode(png).grey[123]).toBe(255);
  });

  it("encodeGrayPng of an all-zero image is black", () => {
    const { png } = encodeGrayPng(new Float64Array(12), 4, 3);
    expect(decode(png).grey.every((v) => v === 0)).toBe(true);
  });

  it("encodeGrayPng shows NaN as black and ignores it for the window", () => {
    const values = Float64Array.from([NaN, 1, 2, 4]);
    const { png, high } = encodeGrayPng(values, 4, 1, { percentile: 100 });
    expect(high).toBe(4);
    expect(decode(png).grey).toEqual([0, 64, 128, 255]);
  });

  it("encodeGrayPng throws RangeError when values.length ≠ width·height", () => {
    expect(() => encodeGrayPng(new Float64Array(5), 2, 2)).toThrow(RangeError);
  });
});

describe("logMagnitude", () => {
  it("logMagnitude computes log10(1 + |z|/(1e-3·max|z|))", () => {
    const re = Float64Array.from([0, 3, 0, -0.003]);
    const im = Float64Array.from([0, 4, 0.05, 0.004]);
    const out = logMagnitude(re, im);
    expect(out[0]).toBe(0);
    expect(out[1]).toBeCloseTo(Math.log10(1001), 12);
    expect(out[2]).toBeCloseTo(Math.log10(1 + 0.05 / 0.005), 12);
    expect(out[3]).toBeCloseTo(Math.log10(2), 12);
  });

  it("logMagnitude of all zeros is all zeros and writes into the given output", () => {
    const out = new Float64Array(3).fill(9);
    const r = logMagnitude(new Float64Array(3), new Float64Array(3), out);
    expect(r).toBe(out);
    expect(Array.from(out)).toEqual([0, 0, 0]);
  });
});
