/**
 * Each encoding scheme runs through the CLI's simulate pipeline (the function
 * the `simulate` command calls) on a bundled phantom and preset, with small
 * matrices via --set, and writes the run folder; kspace.npy has the contract
 * shape [coils, slice, phase, read]. The compiled binary itself is
 * exercised in protocol-cli.test.ts.
 */
import { describe, expect, it } from "vitest";
import { existsSync, mkdtempSync, readFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { run, defaultIsochromatOptions } from "../src/cli/pipeline.js";

const ROOT = resolve(__dirname, "..");

function npyShape(file: string): number[] {
  const b = readFileSync(file);
  const len = b.readUInt16LE(8);
  const header = b.subarray(10, 10 + len).toString("latin1");
  return header.match(/'shape': \(([^)]*)\)/)![1]!.split(",").map((s) => s.trim()).filter(Boolean).map(Number);
}

const small = ["matrix.read=32", "matrix.phase=32"];
const CASES: [string, string, string[], number[]][] = [
  ["gre3d-t1-1.5t", "two-bottle", ["matrix.slice=8", "slice.thickness=10 mm"], [1, 8, 32, 64]],
  ["bssfp-1.5t", "disc", [], [1, 1, 32, 64]],
  // 1-cycle crushers keep the automatic through-slice count (pathway moments of a 16-echo train) small for this plumbing check
  ["rare-t2-1.5t", "two-bottle", ["crusherCycles=1"], [1, 1, 32, 64]],
  ["epi-1.5t", "two-bottle", [], [1, 1, 32, 64]],
  ["epi-se-1.5t", "two-bottle", [], [1, 1, 32, 64]],
  ["epi-4shot-3t", "torso-slice", [], [1, 1, 32, 64]],
  ["se-t1-multislice-1.5t", "disc", ["slices.count=3"], [1, 3, 32, 64]],
];

describe("every scheme writes a run folder through the simulate pipeline", () => {
  const dir = mkdtempSync(join(tmpdir(), "isofold-seq-"));
  for (const [preset, ph, extra, shape] of CASES) {
    it(`${preset} on ${ph}`, async () => {
      const out = join(dir, preset);
      const r = await run({
        phantom: join(ROOT, "phantoms", `${ph}.json`), protocol: preset, sets: [...small, ...extra], out, seed: 1,
        iso: { ...defaultIsochromatOptions(), density: 1 }, quiet: true,
      });
      for (const f of ["image.png", "kspace.png", "kspace.npy", "image.npy", "image.nii", "report.json", "report.html"]) expect(existsSync(join(out, f))).toBe(true);
      expect(r.files).toHaveLength(7);
      expect(npyShape(join(out, "kspace.npy"))).toEqual(shape);
      const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
      expect(rep.sequence.derived.scanTime.value).toBeGreaterThan(0);
      let max = 0;
      const img = readFileSync(join(out, "image.npy"));
      expect(img.length).toBeGreaterThan(8 * shape[1]! * 32 * 32);
      max = rep.measurements.imageMax;
      expect(max).toBeGreaterThan(0);
    }, 60_000);
  }
});
