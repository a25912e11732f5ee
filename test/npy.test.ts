import { describe, expect, it } from "vitest";
import npyjs, { dump as npyjsDump } from "npyjs";
import { decodeNpy, encodeNpy } from "../src/io/npy.js";
import { UserError } from "../src/errors.js";

/** Copies bytes into a fresh ArrayBuffer, as npyjs expects. */
function toArrayBuffer(bytes: Uint8Array): ArrayBuffer {
  const ab = new ArrayBuffer(bytes.byteLength);
  new Uint8Array(ab).set(bytes);
  return ab;
}

/** Bytes 0..9 + header as text, and the header length field. */
function preamble(bytes: Uint8Array): { headerLen: number; header: string; total: number } {
  const headerLen = bytes[8]! | (bytes[9]! << 8);
  const header = new TextDecoder("latin1").decode(bytes.subarray(10, 10 + headerLen));
  return { headerLen, header, total: 10 + headerLen };
}

describe("encodeNpy", () => {
  it("encodeNpy complex64 is read by npyjs as '<c8' with interleaved float32 values and the shape kept", () => {
    const shape = [1, 1, 3, 4];
    const re = Float64Array.from({ length: 12 }, (_, i) => i * 0.5 - 2);
    const im = Float64Array.from({ length: 12 }, (_, i) => Math.sin(i));
    const bytes = encodeNpy({ dtype: "complex64", shape, data: { re, im } });
    const parsed = new npyjs().parse(toArrayBuffer(bytes));
    expect(parsed.dtype).toBe("c8");
    expect(parsed.shape).toEqual(shape);
    expect(parsed.fortranOrder).toBe(false);
    const data = parsed.data as Float32Array;
    expect(data).toBeInstanceOf(Float32Array);
    expect(data.length).toBe(24);
    for (let i = 0; i < 12; i++) {
      expect(data[2 * i]).toBe(Math.fround(re[i]!));
      expect(data[2 * i + 1]).toBe(Math.fround(im[i]!));
    }
  });

  it("encodeNpy float32 is read by npyjs as '<f4' with the same values", () => {
    const values = Float64Array.from([0, -1.5, 3.25, 1e-7, 6e4, Math.PI]);
    const bytes = encodeNpy({ dtype: "float32", shape: [2, 3], data: values });
    const parsed = new npyjs().parse(toArrayBuffer(bytes));
    expect(parsed.dtype).toBe("f4");
    expect(parsed.shape).toEqual([2, 3]);
    expect(Array.from(parsed.data as Float32Array)).toEqual(Array.from(values, Math.fround));
  });

  it("encodeNpy uint8 of a 1-D shape is read by npyjs as 'u1' and writes the shape as '(5,)'", () => {
    const values = Uint8Array.from([0, 1, 127, 200, 255]);
    const bytes = encodeNpy({ dtype: "uint8", shape: [5], data: values });
    const parsed = new npyjs().parse(toArrayBuffer(bytes));
    expect(parsed.dtype).toBe("u1");
    expect(parsed.shape).toEqual([5]);
    expect(Array.from(parsed.data as Uint8Array)).toEqual([0, 1, 127, 200, 255]);
    expect(preamble(bytes).header).toContain("'shape': (5,)");
    expect(preamble(bytes).header).toContain("'descr': '|u1'");
  });

  it("encodeNpy float64 and int32 are read by npyjs with the same values", () => {
    const f = encodeNpy({ dtype: "float64", shape: [3], data: [1 / 3, -2, 1e300] });
    const pf = new npyjs().parse(toArrayBuffer(f));
    expect(pf.dtype).toBe("f8");
    expect(Array.from(pf.data as Float64Array)).toEqual([1 / 3, -2, 1e300]);
    const i = encodeNpy({ dtype: "int32", shape: [2, 2], data: [-2147483648, -1, 0, 2147483647] });
    const pi = new npyjs().parse(toArrayBuffer(i));
    expect(pi.dtype).toBe("i4");
    expect(Array.from(pi.data as Int32Array)).toEqual([-2147483648, -1, 0, 2147483647]);
  });

  for (const shape of [[], [7], [2, 3], [1, 1, 256, 512], [123456, 7, 1, 1, 1, 1, 1, 1, 1, 1]]) {
    it(`encodeNpy writes magic, version 1.0 and a preamble that is a multiple of 64 bytes ending in \\n for shape [${shape.join(", ")}]`, () => {
      const count = shape.reduce((a, b) => a * b, 1);
      const bytes = encodeNpy({ dtype: "uint8", shape, data: new Uint8Array(count) });
      expect(Array.from(bytes.subarray(0, 8))).toEqual([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]);
      const { header, total } = preamble(bytes);
      expect(total % 64).toBe(0);
      expect(header.endsWith("\n")).toBe(true);
      expect(header.startsWith("{'descr': '|u1', 'fortran_order': False, 'shape': (")).toBe(true);
      expect(bytes.length).toBe(total + count);
    });
  }

  it("encodeNpy throws RangeError when the data length differs from the shape", () => {
    expect(() => encodeNpy({ dtype: "float32", shape: [2, 3], data: new Float32Array(5) })).toThrow(RangeError);
    expect(() =>
      encodeNpy({ dtype: "complex64", shape: [2], data: { re: new Float64Array(2), im: new Float64Array(3) } }),
    ).toThrow(RangeError);
  });
});

describe("decodeNpy", () => {
  it("decodeNpy(encodeNpy(complex64)) returns the float32-rounded re and im and the shape", () => {
    const re = Float64Array.from([1.1, -2.2, 3.3, 0]);
    const im = Float64Array.from([0.5, 0, -7.25, 1e-3]);
    const out = decodeNpy(encodeNpy({ dtype: "complex64", shape: [2, 2], data: { re, im } }));
    expect(out.dtype).toBe("complex64");
    expect(out.shape).toEqual([2, 2]);
    if (out.dtype !== "complex64") throw new Error("unreachable");
    expect(Array.from(out.data.re)).toEqual(Array.from(re, Math.fround));
    expect(Array.from(out.data.im)).toEqual(Array.from(im, Math.fround));
  });

  it("decodeNpy round-trips float32, float64, uint8 and int32 exactly", () => {
    const cases = [
      { dtype: "float32", data: Float32Array.from([1.5, -0.25, 3]) },
      { dtype: "float64", data: Float64Array.from([Math.E, -1e-300, 0]) },
      { dtype: "uint8", data: Uint8Array.from([9, 0, 255]) },
      { dtype: "int32", data: Int32Array.from([-5, 123456789, 0]) },
    ] as const;
    for (const c of cases) {
      const out = decodeNpy(encodeNpy({ dtype: c.dtype, shape: [3, 1], data: c.data }));
      expect(out.dtype).toBe(c.dtype);
      expect(out.shape).toEqual([3, 1]);
      expect(Array.from(out.data as ArrayLike<number>)).toEqual(Array.from(c.data));
    }
  });

  it("decodeNpy reads a '<c16' file written by npyjs as complex128 re/im", () => {
    const interleaved = Float64Array.from([1, 2, -3, 4.5, 1e-20, -6]);
    const ab = npyjsDump(interleaved, [3], { dtype: "c16" });
    const out = decodeNpy(new Uint8Array(ab));
    expect(out.dtype).toBe("complex128");
    expect(out.shape).toEqual([3]);
    if (out.dtype !== "complex128") throw new Error("unreachable");
    expect(Array.from(out.data.re)).toEqual([1, -3, 1e-20]);
    expect(Array.from(out.data.im)).toEqual([2, 4.5, -6]);
  });

  it("decodeNpy reads a version 2.0 file (uint32 header length)", () => {
    const v1 = encodeNpy({ dtype: "float64", shape: [2], data: [7, 8] });
    const headerLen = v1[8]! | (v1[9]! << 8);
    const v2 = new Uint8Array(v1.length + 2);
    v2.set(v1.subarray(0, 8));
    v2[6] = 2;
    new DataView(v2.buffer).setUint32(8, headerLen, true);
    v2.set(v1.subarray(10), 12);
    const out = decodeNpy(v2);
    expect(out.shape).toEqual([2]);
    expect(Array.from(out.data as Float64Array)).toEqual([7, 8]);
  });

  it("decodeNpy reads the shape () of a 0-d array as [] with one value", () => {
    const out = decodeNpy(encodeNpy({ dtype: "float64", shape: [], data: [42] }));
    expect(out.shape).toEqual([]);
    expect(Array.from(out.data as Float64Array)).toEqual([42]);
  });

  it("decodeNpy throws a UserError naming the file for bad magic, Fortran order, unsupported dtype and truncated data", () => {
    expect(() => decodeNpy(new TextEncoder().encode("hello world, not npy"), "fieldmap.npy")).toThrow(/fieldmap\.npy.*magic/);
    const good = encodeNpy({ dtype: "float32", shape: [2, 2], data: new Float32Array(4) });
    const text = (b: Uint8Array) => new TextDecoder("latin1").decode(b);
    const patch = (from: string, to: string) => {
      const b = good.slice();
      const s = text(b).replace(from, to);
      for (let i = 0; i < s.length; i++) b[i] = s.charCodeAt(i);
      return b;
    };
    expect(() => decodeNpy(patch("False", "True "), "a.npy")).toThrow(/Fortran/);
    expect(() => decodeNpy(patch("'<f4'", "'>f4'"), "a.npy")).toThrow(/dtype '>f4'/);
    expect(() => decodeNpy(good.subarray(0, good.length - 1), "a.npy")).toThrow(/truncated/);
    expect(() => decodeNpy(good.subarray(0, good.length - 1), "a.npy")).toThrow(UserError);
  });
});
