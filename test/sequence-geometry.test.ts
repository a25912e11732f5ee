/**
 * Geometry on simulated images, against the encoding relations of
 * Bernstein, King & Zhou 2004, Handbook of MRI Pulse Sequences, ch. 11: FOV = 1/Δk and the
 * periodic image x′ = x − n·FOV (phase always; read only without the
 * receiver's anti-alias filter); Δx_pix = Δf/BW_pix along read with the sign
 * of the readout polarity; a 3D sphere keeps its radius along all three axes;
 * an oblique section of a cylinder is an ellipse of semi-axis R/cosθ.
 */
import { describe, expect, it } from "vitest";
import { centroid, halfMaxWidth, phantom, proto, simulate, tissue } from "./sequence-helpers.js";
import type { ComplexData } from "../src/io/npy.js";

const gel = tissue("20 ms", "20 ms");
const discAt = (x: string, y: string, r = "1 cm", b0?: string) =>
  phantom({
    tissues: { gel },
    shapes: [{ shape: "ellipse", center: [x, y], semiAxes: [r, r], tissue: "gel" }],
    ...(b0 ? { b0: { expression: b0 } } : {}),
  });

function peakRow(mag: Float64Array, nPhase: number, nRead: number): number {
  return centroid(mag, nPhase, nRead, 0, 0.3).phase;
}

describe("rectangular FOV and phase oversampling: wrap at x − FOV exactly when the object leaves the phase FOV", () => {
  // read 16 cm / 32 px, phase 8 cm / 16 px: 5 mm pixels both ways
  const base = { fov: { read: "16 cm", phase: "8 cm" }, matrix: { read: 32, phase: 16 }, tr: "100 ms", te: "4 ms" };
  it("inside the phase FOV: at its place (y = +3 cm → row 8 + 6)", () => {
    const r = simulate(proto(base), discAt("0 cm", "3 cm", "0.8 cm"));
    expect(peakRow(r.mag, 16, 32)).toBeCloseTo(14, 1);
  });
  it("beyond the phase FOV: y = +5 cm appears at 5 − 8 = −3 cm (row 2), within 0.1 px", () => {
    const r = simulate(proto(base), discAt("0 cm", "5 cm", "0.8 cm"));
    expect(Math.abs(peakRow(r.mag, 16, 32) - 2)).toBeLessThan(0.1);
  });
  it("with 50 % phase oversampling (acquired FOV 12 cm) the object at +5 cm is not folded in", () => {
    const inside = simulate(proto(base), discAt("0 cm", "3 cm", "0.8 cm"));
    const r = simulate(proto({ ...base, oversampling: { read: 2, phase: 0.5 } }), discAt("0 cm", "5 cm", "0.8 cm"));
    let max = 0, ref = 0;
    for (const v of r.mag) max = Math.max(max, v);
    for (const v of inside.mag) ref = Math.max(ref, v);
    expect(max).toBeLessThan(0.05 * ref);
  });
  it("readout: without the receiver filter an object at x = 13 cm folds to 13 − 16 = −3 cm (read FOV 8 cm × 2 oversampling); with it, it is gone", () => {
    const rb = { fov: { read: "8 cm", phase: "16 cm" }, matrix: { read: 16, phase: 32 }, tr: "100 ms", te: "4 ms" };
    const off = simulate(proto({ ...rb, receiverFilter: false }), discAt("13 cm", "0 cm", "0.8 cm"));
    const c = centroid(off.mag, 32, 16, 0, 0.3);
    expect(Math.abs(c.read - (8 - 6))).toBeLessThan(0.1);
    const on = simulate(proto(rb), discAt("13 cm", "0 cm", "0.8 cm"));
    let a = 0, b = 0;
    for (const v of on.mag) a = Math.max(a, v);
    for (const v of off.mag) b = Math.max(b, v);
    expect(a).toBeLessThan(1e-6 * b);
  });
});

describe("readout polarity: Δx_pix = ±Δf/BW_pix (sign follows the readout gradient)", () => {
  it("a +100 Hz object moves +0.4 px with positive polarity and −0.4 px with negative at 250 Hz/px", () => {
    const shift = (pol: string) => {
      const p = proto({ readoutPolarity: pol, tr: "100 ms", te: "4 ms" });
      const a = simulate(p, discAt("0 cm", "0 cm", "3 cm"));
      const b = simulate(p, discAt("0 cm", "0 cm", "3 cm", "100"));
      return centroid(b.mag, 32, 32, 0, 0.5).read - centroid(a.mag, 32, 32, 0, 0.5).read;
    };
    expect(shift("positive")).toBeCloseTo(0.4, 1);
    expect(shift("negative")).toBeCloseTo(-0.4, 1);
  });
});

describe("oblique slice: an axial section tilted 30° about read through a z-cylinder of radius R is an ellipse R × R/cos30°", () => {
  it("half-maximum widths along read and phase", () => {
    const ph = phantom({ tissues: { gel }, shapes: [{ shape: "cylinder", center: ["0 cm", "0 cm", "0 cm"], radius: "3 cm", length: "30 cm", axis: "z", tissue: "gel" }] });
    const p = proto({ slice: { angle: "30 deg" }, tr: "100 ms", te: "4 ms", excitation: { shape: "sinc", duration: "2 ms", tbw: 4 } });
    const r = simulate(p, ph, { sliceCount: 24, sliceExtent: 3, density: 2 });
    const row = Array.from({ length: 32 }, (_, x) => r.mag[16 * 32 + x]!);
    const col = Array.from({ length: 32 }, (_, y) => r.mag[y * 32 + 16]!);
    const level = 0.5 * r.mag[16 * 32 + 16]!;
    expect(Math.abs(halfMaxWidth(row, level) - 12)).toBeLessThan(0.5); // 2R / 5 mm
    expect(Math.abs(halfMaxWidth(col, level) - 12 / Math.cos(Math.PI / 6))).toBeLessThan(0.5);
  });
});

describe("3D spoiled gradient echo: a sphere reconstructs as a sphere", () => {
  it("radius 3.5 cm from the half-maximum widths along read, phase and slice-encoding step, within half a voxel", () => {
    const ph = phantom({ tissues: { gel }, shapes: [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "3.5 cm", tissue: "gel" }] });
    const p = proto({ sequence: "gre3d", matrix: { read: 32, phase: 32, slice: 20 }, slice: { thickness: "5 mm" }, tr: "60 ms", te: "4 ms" });
    const r = simulate(p, ph, { density: 1 });
    const N = 20, plane = 32 * 32;
    // the sphere centre: read/phase index 16; slice-encoding steps tile the slab, centre between slice-encoding steps 9 and 10
    const centre = 0.5 * (r.mag[9 * plane + 16 * 32 + 16]! + r.mag[10 * plane + 16 * 32 + 16]!);
    const level = 0.5 * centre;
    const row = Array.from({ length: 32 }, (_, x) => 0.5 * (r.mag[9 * plane + 16 * 32 + x]! + r.mag[10 * plane + 16 * 32 + x]!));
    const col = Array.from({ length: 32 }, (_, y) => 0.5 * (r.mag[9 * plane + y * 32 + 16]! + r.mag[10 * plane + y * 32 + 16]!));
    const part = Array.from({ length: N }, (_, q) => r.mag[q * plane + 16 * 32 + 16]!);
    const radius = 7; // 3.5 cm / 5 mm
    expect(Math.abs(halfMaxWidth(row, level) / 2 - radius)).toBeLessThan(0.5);
    expect(Math.abs(halfMaxWidth(col, level) / 2 - radius)).toBeLessThan(0.5);
    expect(Math.abs(halfMaxWidth(part, level) / 2 - radius)).toBeLessThan(0.5);
    // centred along slice-encoding steps between 9 and 10: the profile is symmetric about 9.5
    for (let q = 0; q < 10; q++) expect(Math.abs(part[q]! - part[19 - q]!)).toBeLessThan(0.02 * centre);
  });
});

describe("multi-slice: each slice is its own run at its own position, stacked in spatial order", () => {
  it("slices at z = −2, 0, +2 cm through a sphere of radius 3 cm centred at z = 0.5 cm show discs of radius √(R² − (z − 0.5 cm)²), in that order", async () => {
    const { mkdtempSync, writeFileSync, readFileSync } = await import("node:fs");
    const { tmpdir } = await import("node:os");
    const { join } = await import("node:path");
    const { run, defaultIsochromatOptions } = await import("../src/cli/pipeline.js");
    const { decodeNpy } = await import("../src/io/npy.js");
    const dir = mkdtempSync(join(tmpdir(), "isofold-ms-"));
    const phFile = join(dir, "sphere.json"), prFile = join(dir, "ms.json");
    writeFileSync(phFile, JSON.stringify({ name: "sphere", tissues: { gel: { pd: 1, t1: "20 ms", t2: "20 ms", t2star: "20 ms", species: "water" } },
      shapes: [{ shape: "sphere", center: ["0 cm", "0 cm", "0.5 cm"], radius: "3 cm", tissue: "gel" }] }));
    writeFileSync(prFile, JSON.stringify({ sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
      slice: { thickness: "2 mm", position: "0 mm", orientation: "axial" }, slices: { count: 3, gap: "18 mm", order: "interleaved" },
      bandwidth: "250 Hz/px", te: "6 ms", tr: "100 ms", flip: "90 deg", excitation: { shape: "sinc", duration: "2 ms", tbw: 4 } }));
    await run({ phantom: phFile, protocol: prFile, sets: [], out: join(dir, "run"), seed: 1, iso: { ...defaultIsochromatOptions(), density: 1, sliceCount: 12, sliceExtent: 3 }, quiet: true });
    const img = decodeNpy(readFileSync(join(dir, "run", "image.npy")));
    expect(img.shape).toEqual([1, 3, 32, 32]);
    const { re, im } = img.data as ComplexData;
    const radiiPx = [-2, 0, 2].map((z) => Math.sqrt(9 - (z - 0.5) ** 2) / 0.5);
    for (let s = 0; s < 3; s++) {
      const o = s * 1024;
      const row = Array.from({ length: 32 }, (_, x) => Math.hypot(re[o + 16 * 32 + x]!, im[o + 16 * 32 + x]!));
      const width = halfMaxWidth(row, 0.5 * row[16]!);
      expect(Math.abs(width / 2 - radiiPx[s]!)).toBeLessThan(0.5);
    }
  }, 60_000);
});
