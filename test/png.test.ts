import { describe, expect, it } from "vitest";
import { PNG } from "pngjs";
import { crc32 as zlibCrc32 } from "node:zlib";
import { crc32, encodeGrayPng, insertTextChunks, logMagnitude, percentile, SIMULATED_NOTE } from "../src/io/png.js";

/** Decodes a PNG and returns its size, colour type and the grey level of every pixel (red channel). */
function decode(bytes: Uint8Array): { width: number; height: number; colorType: number; grey: number[] } {
  const png = PNG.sync.read(Buffer.from(bytes));
  const grey: number[] = [];
  for (let i = 0; i < png.width * png.height; i++) grey.push(png.data[4 * i]!);
  // Colour type and bit depth are bytes 25 and 24 of the file (IHDR chunk data).
  return { width: png.width, height: png.height, colorType: bytes[25]!, grey };
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

  it("percentile by selection gives bitwise the value of the sorted-copy definition (duplicates, ±0, NaN, ±∞)", () => {
    // oracle: the definition itself, on a copy sorted by TypedArray sort (−0 before +0)
    const bySort = (v: number[], p: number) => {
      const s = Float64Array.from(v.filter(Number.isFinite)).sort();
      if (s.length === 0) return NaN;
      const h = ((s.length - 1) * p) / 100, lo = Math.floor(h);
      return lo >= s.length - 1 ? s[s.length - 1]! : s[lo]! + (h - lo) * (s[lo + 1]! - s[lo]!);
    };
    let seed = 7;
    const rand = () => ((seed = (seed * 1103515245 + 12345) % 2 ** 31) / 2 ** 31);
    const pool = [0, -0, 1, -1, 2.5, 1e-300, -3, NaN, Infinity, -Infinity];
    let checked = 0;
    for (let n = 1; n <= 40; n++) {
      for (let rep = 0; rep < 6; rep++) {
        const v = Array.from({ length: n }, () => (rand() < 0.5 ? pool[Math.floor(rand() * pool.length)]! : Math.round(rand() * 20) / 4 - 2));
        for (const p of [0, 0.3, 25, 50, 99.5, 100]) {
          const want = bySort(v, p), got = percentile(v, p);
          if (!Object.is(got, want)) throw new Error(`percentile(${JSON.stringify(v.map(String))}, ${p}) = ${got}, sorted copy gives ${want}`);
          checked++;
        }
      }
    }
    expect(checked).toBe(40 * 6 * 6);
    // zeros of mixed sign: the largest of [−0, +0, −0] is +0, of [−0, −0] it is −0, as in the sorted copy
    expect(Object.is(percentile([-0, 0, -0], 100), 0)).toBe(true);
    expect(Object.is(percentile([-0, -0], 100), -0)).toBe(true);
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

/** Walks the chunks of a PNG file (PNG specification 5.3): type, data, stored CRC. */
function chunks(bytes: Uint8Array): { type: string; data: Uint8Array; crc: number; body: Uint8Array }[] {
  const out = [];
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  let o = 8;
  while (o < bytes.length) {
    const len = dv.getUint32(o);
    const type = String.fromCharCode(...bytes.subarray(o + 4, o + 8));
    out.push({ type, data: bytes.subarray(o + 8, o + 8 + len), crc: dv.getUint32(o + 8 + len), body: bytes.subarray(o + 4, o + 8 + len) });
    o += 12 + len;
  }
  return out;
}

describe("PNG text chunks", () => {
  it("crc32 gives the CRC-32 check value 0xCBF43926 of '123456789' and agrees with node:zlib on random bytes", () => {
    // check value of CRC-32/ISO-HDLC (the PNG CRC) in the published CRC catalogue (Greg Cook, "Catalogue of parametrised CRC algorithms")
    expect(crc32(new TextEncoder().encode("123456789"))).toBe(0xcbf43926);
    const b = Uint8Array.from({ length: 1000 }, (_, i) => (i * 7919 + 13) & 0xff);
    expect(crc32(b)).toBe(zlibCrc32(b));
  });

  it("every encoded PNG carries a tEXt 'Description' chunk saying it is simulated, after IHDR, with a correct CRC", () => {
    const { png } = encodeGrayPng(Float64Array.from({ length: 12 }, (_, i) => i), 4, 3, { high: 11, text: { Software: "isofold test" } });
    const c = chunks(png);
    expect(c[0]!.type).toBe("IHDR");
    expect(c[c.length - 1]!.type).toBe("IEND");
    const text = c.filter((k) => k.type === "tEXt").map((k) => {
      const nul = k.data.indexOf(0);
      return [String.fromCharCode(...k.data.subarray(0, nul)), String.fromCharCode(...k.data.subarray(nul + 1))];
    });
    expect(Object.fromEntries(text)).toEqual({ Description: SIMULATED_NOTE, Software: "isofold test" });
    expect(SIMULATED_NOTE).toMatch(/simulated/i);
    expect(SIMULATED_NOTE).toMatch(/not a scan/i);
    for (const k of c) expect(k.crc).toBe(zlibCrc32(k.body)); // node:zlib's CRC-32 as the reference
    // pngjs (which checks chunk CRCs) still reads the pixels
    expect(decode(png).grey).toEqual(Array.from({ length: 12 }, (_, i) => Math.round((255 * i) / 11)));
  });

  it("insertTextChunks rejects bad keywords and text outside Latin-1", () => {
    const { png } = encodeGrayPng(new Float64Array(4), 2, 2);
    expect(() => insertTextChunks(png, { "": "x" })).toThrow(RangeError);
    expect(() => insertTextChunks(png, { " lead": "x" })).toThrow(RangeError);
    expect(() => insertTextChunks(png, { ["k".repeat(80)]: "x" })).toThrow(RangeError);
    expect(() => insertTextChunks(png, { Comment: "arrow →" })).toThrow(RangeError);
    expect(() => insertTextChunks(new Uint8Array(40), { Comment: "x" })).toThrow(RangeError);
  });
});
