/**
 * The small HDF5 writer behind raw.h5 (src/io/hdf5.ts), read back with
 * h5wasm, i.e. the HDF5 C library itself: nested groups, a compound with an
 * array member and variable-length members, an empty sequence, a
 * variable-length string, and payloads over several global heap collections
 * (more than the 1 MiB one collection holds).
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import h5wasm, { type Dataset, type File as H5File, type Group } from "h5wasm/node";
import { writeHdf5, type H5Type } from "../src/io/hdf5.js";

const tmp = mkdtempSync(join(tmpdir(), "isofold-hdf5-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));
beforeAll(async () => {
  await h5wasm.ready;
});

describe("hdf5 writer", () => {
  it("writes what the HDF5 library reads back, value for value, across several heap collections", () => {
    const rec: H5Type = {
      kind: "compound",
      members: [
        { name: "k", type: { kind: "int", size: 2, signed: false } },
        { name: "t", type: { kind: "int", size: 8, signed: false } },
        { name: "v", type: { kind: "array", base: { kind: "float", size: 4 }, dims: [3] } },
        { name: "s", type: { kind: "vlen", base: { kind: "float", size: 4 } } },
      ],
    };
    const n = 40, es = 2 + 8 + 12 + 16, len = (i: number) => (i % 7 === 3 ? 0 : 20000 + 37 * i); // ~2.8 MB of floats
    const data = new Uint8Array(n * es), dv = new DataView(data.buffer);
    const vlen: { at: number; count: number; payload: Uint8Array }[] = [];
    const want: Float32Array[] = [];
    for (let i = 0; i < n; i++) {
      dv.setUint16(i * es, 3 * i + 1, true);
      dv.setBigUint64(i * es + 2, (1n << 40n) + BigInt(i), true);
      for (let k = 0; k < 3; k++) dv.setFloat32(i * es + 10 + 4 * k, i - k / 4, true);
      const f = new Float32Array(len(i));
      for (let j = 0; j < f.length; j++) f[j] = Math.sin(i + j / 100);
      want.push(f);
      vlen.push({ at: i * es + 22, count: f.length, payload: new Uint8Array(f.buffer) });
    }
    const text = "<header a=\"1\">ascii, as the ISMRMRD library stores its XML</header>";
    const t = new TextEncoder().encode(text);
    const bytes = writeHdf5({
      outer: {
        inner: { records: { type: rec, shape: [n], data, vlen } },
        note: { type: { kind: "vlenString" }, shape: [1], data: new Uint8Array(16), vlen: [{ at: 0, count: t.length, payload: t }] },
        plain: { type: { kind: "float", size: 8 }, shape: [2, 3], data: new Uint8Array(new Float64Array([1, 2, 3, 4, 5, 6.5]).buffer) },
      },
    });
    expect(bytes.length).toBeGreaterThan(2 * 2 ** 20); // at least three 1 MiB collections
    const file = join(tmp, "t.h5");
    writeFileSync(file, bytes);
    const f = new h5wasm.File(file, "r");
    expect(f.keys()).toEqual(["outer"]);
    expect((f.get("outer") as Group).keys().sort()).toEqual(["inner", "note", "plain"]);
    expect(String((f.get("outer/note") as Dataset).value)).toBe(text);
    const plain = f.get("outer/plain") as Dataset;
    expect(plain.shape).toEqual([2, 3]);
    expect(Array.from(plain.value as Float64Array)).toEqual([1, 2, 3, 4, 5, 6.5]);
    const rows = (f.get("outer/inner/records") as Dataset).value as unknown as [number, bigint, number[], Float32Array][];
    expect(rows.length).toBe(n);
    rows.forEach((r, i) => {
      expect(r[0]).toBe(3 * i + 1);
      expect(BigInt(r[1])).toBe((1n << 40n) + BigInt(i));
      expect(Array.from(r[2])).toEqual([i, i - 0.25, i - 0.5]);
      expect(r[3].length).toBe(want[i]!.length);
      expect(Buffer.from(r[3].buffer, r[3].byteOffset, r[3].byteLength).equals(Buffer.from(want[i]!.buffer))).toBe(true);
    });
    f.close();
  });
});
