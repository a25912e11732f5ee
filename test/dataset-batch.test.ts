import { describe, expect, it } from "vitest";
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { applyPerturbation, drawPerturbation, parseVary, noVary } from "../src/dataset/batch.js";
import { runBatch } from "../src/io/dataset-folder.js";
import { Rng } from "../src/dataset/prng.js";
import { parsePhantom } from "../src/phantom/index.js";
import { UserError } from "../src/errors.js";

const ph = parsePhantom({
  name: "t", tissues: { a: { pd: 0.8, t1: "800 ms", t2: "80 ms", t2star: "40 ms", species: "water" } },
  shapes: [{ shape: "ellipse", center: ["2 cm", "1 cm"], semiAxes: ["3 cm", "1 cm"], tissue: "a" }],
}, "t.json", 1.5);

describe("dataset batches", () => {
  it("parseVary reads units and percentages; rejects unknown keys naming --vary", () => {
    const v = parseVary(['position="1 cm",rotation=10deg', "size=10%,t1=0.2", "b0=20 Hz"]);
    expect(v.position).toBeCloseTo(0.01, 15);
    expect(v.rotation).toBeCloseTo((10 * Math.PI) / 180, 15);
    expect(v.size).toBeCloseTo(0.1, 15);
    expect(v.t1).toBeCloseTo(0.2, 15);
    expect(v.b0).toBeCloseTo(20, 12);
    expect(() => parseVary(["shear=3"])).toThrow(UserError);
    expect(() => parseVary(["shear=3"])).toThrow(/^--vary: /);
  });

  it("applyPerturbation moves and turns the object rigidly: a point of the original maps to the rotated, shifted point", () => {
    const v = { ...noVary(), position: 0.02, rotation: 0.5 };
    const p = drawPerturbation(v, ph, Rng.stream(3, 1, 1));
    const q = applyPerturbation(ph, p);
    const c = Math.cos(p.rotation), s = Math.sin(p.rotation);
    // rigid motion x' = R(θ)x + t (rotation about z, common practice)
    for (const [x, y] of [[0.02, 0.01], [0.045, 0.012], [-0.005, 0.01], [0.02, 0.0185]] as const) {
      const xp = c * x - s * y + p.shift[0], yp = s * x + c * y + p.shift[1];
      expect(q.shapes[0]!.contains(xp, yp, 0)).toBe(ph.shapes[0]!.contains(x, y, 0));
    }
    expect(Math.abs(p.shift[0])).toBeLessThanOrEqual(0.02);
    expect(Math.abs(p.rotation)).toBeLessThanOrEqual(0.5);
    expect(q.tissues[0]!.t1).toBe(ph.tissues[0]!.t1);
  });

  it("applyPerturbation scales relaxation and adds a linear B0 within the stated ranges", () => {
    const v = { ...noVary(), t1: 0.1, t2: 0.1, b0: 20 };
    const p = drawPerturbation(v, ph, Rng.stream(3, 2, 1));
    const q = applyPerturbation(ph, p);
    expect(Math.abs(q.tissues[0]!.t1 / ph.tissues[0]!.t1 - 1)).toBeLessThanOrEqual(0.1);
    expect(q.tissues[0]!.t2star).toBeLessThanOrEqual(q.tissues[0]!.t2);
    expect(q.b0!(0, 0, 0)).toBeCloseTo(p.b0.f0, 12);
    expect(q.b0!(0.1, 0, 0) - q.b0!(0, 0, 0)).toBeCloseTo(p.b0.gx * 0.1, 9);
    expect(Math.abs(p.b0.gx * 0.1)).toBeLessThanOrEqual(20);
  });

  it("runBatch skips cases whose files match the manifest and redoes a damaged one", async () => {
    const dir = mkdtempSync(join(tmpdir(), "isofold-batch-"));
    try {
      const calls: number[] = [];
      const make = (i: number) => {
        calls.push(i);
        return { files: new Map<string, Uint8Array | string>([["a.txt", `case ${i}`], ["b.bin", Uint8Array.of(i, 1, 2)]]), params: { i } };
      };
      expect(await runBatch(dir, 3, 1, (i) => `k${i}`, make)).toEqual({ made: [0, 1, 2], skipped: [] });
      const manifest = readFileSync(join(dir, "manifest.jsonl"), "utf8");
      writeFileSync(join(dir, "case-0001", "a.txt"), "damaged");
      calls.length = 0;
      expect(await runBatch(dir, 3, 1, (i) => `k${i}`, make)).toEqual({ made: [1], skipped: [0, 2] });
      expect(calls).toEqual([1]);
      expect(readFileSync(join(dir, "manifest.jsonl"), "utf8")).toBe(manifest);
      // other settings (another key) redo every case
      expect((await runBatch(dir, 3, 1, (i) => `other${i}`, make)).made).toEqual([0, 1, 2]);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
