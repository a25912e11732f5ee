/**
 * Tissue far outside the FOV wraps: the isochromat grid covers every shape's
 * whole extent along phase (and along slice encoding in 3D), and along read
 * wherever the receiver filter passes signal (everywhere without it).
 * Closed form: Nyquist folding, a point at x appears at x' = x − FOV·round(x/FOV)
 * (sampling k at multiples of 1/FOV makes exp(−i2πk·x) periodic in x with
 * period FOV; common practice). "Full amplitude": the image of the far
 * marker equals, to rounding, the image of the same marker placed at x'
 * (shifting by a whole number of FOVs moves the isochromat grid onto itself).
 */
import { describe, expect, it } from "vitest";
import { makeIsochromats, defaultIsochromatOptions } from "../src/isochromats/index.js";
import { logicalAxes } from "../src/protocol/geometry.js";
import { sampledLimits } from "../src/cli/pipeline.js";
import { phantom, proto, simulate, tissue } from "./sequence-helpers.js";

const fold = (x: number, fov: number) => x - fov * Math.round(x / fov);

/** A centre disc plus a small marker disc at (mx, my) (m), 2D shapes; or 3D (sphere marker at z = mz, cylinder centre). */
function markerPhantom(mx: number, my: number, mz?: number) {
  const cm = (v: number) => `${(v * 100).toFixed(6)} cm`;
  if (mz === undefined) {
    return phantom({
      tissues: { gel: tissue("1000 ms", "100 ms"), mark: tissue("500 ms", "80 ms") },
      shapes: [
        { shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["3 cm", "2 cm"], tissue: "gel" },
        { shape: "ellipse", center: [cm(mx), cm(my)], semiAxes: ["1.2 cm", "1.2 cm"], tissue: "mark", label: "marker" },
      ],
    });
  }
  return phantom({
    tissues: { gel: tissue("1000 ms", "100 ms"), mark: tissue("500 ms", "80 ms") },
    shapes: [
      { shape: "cylinder", center: ["0 cm", "0 cm", "0 cm"], radius: "3 cm", length: "0.9 cm", axis: "z", tissue: "gel" },
      { shape: "box", center: [cm(mx), cm(my), cm(mz)], size: ["3 cm", "3 cm", "0.4 cm"], tissue: "mark", label: "marker" },
    ],
  });
}

function relDiff(a: Float64Array, b: Float64Array): number {
  let n = 0, d = 0;
  for (let i = 0; i < a.length; i++) { n += (a[i]! - b[i]!) ** 2; d += b[i]! ** 2; }
  return Math.sqrt(n / d);
}

/** Peak magnitude within ±1 pixel of (row, col) of a [phase][read] plane. */
function peakNear(mag: Float64Array, nRead: number, row: number, col: number, plane = 0, nPhase = 16): number {
  let m = 0;
  for (let r = row - 1; r <= row + 1; r++) for (let c = col - 1; c <= col + 1; c++) m = Math.max(m, mag[plane * nPhase * nRead + r * nRead + c]!);
  return m;
}

describe("far-out tissue wraps at full amplitude (Nyquist folding x' = x − FOV·round(x/FOV))", () => {
  it("along phase: a marker 1.6 × FOV from the centre lands at −0.4 × FOV, as bright as a marker placed there", () => {
    const fov = 0.16, y = 1.6 * fov, y2 = fold(y, fov);
    expect(y2).toBeCloseTo(-0.064, 12);
    const p = proto({ matrix: { read: 16, phase: 16 }, oversampling: { read: 2, phase: 0 } });
    const far = simulate(p, markerPhantom(0, y)), near = simulate(p, markerPhantom(0, y2));
    // the grid reaches the marker: nothing is dropped, no warning
    expect(far.iso.extent.phase[1]).toBeGreaterThan(y + 0.012);
    expect(far.iso.warnings.filter((w) => /sampled only/.test(w))).toEqual([]);
    expect(relDiff(far.mag, near.mag)).toBeLessThan(1e-9);
    // the folded marker sits at row 8 + y2/Δy = 8 − 6.4 → 1.6 and is as bright as the centre disc's own pixels
    const row = Math.round(8 + y2 / (fov / 16));
    expect(peakNear(far.mag, 16, row, 8)).toBeGreaterThan(0.5 * peakNear(far.mag, 16, 8, 8));
  });

  it("along read with the receiver filter off and read oversampling 1: a marker at 1.6 × FOV folds to −0.4 × FOV", () => {
    const fov = 0.16, x = 1.6 * fov, x2 = fold(x, fov);
    const p = proto({ matrix: { read: 16, phase: 16 }, oversampling: { read: 1, phase: 0 }, receiverFilter: false });
    const far = simulate(p, markerPhantom(x, 0)), near = simulate(p, markerPhantom(x2, 0));
    expect(far.iso.extent.read[1]).toBeGreaterThan(x + 0.012);
    expect(relDiff(far.mag, near.mag)).toBeLessThan(1e-9);
    const col = Math.round(8 + x2 / (fov / 16));
    expect(peakNear(far.mag, 16, 8, col)).toBeGreaterThan(0.5 * peakNear(far.mag, 16, 8, 8));
  });

  it("along read with the receiver filter on, the far marker is stopped by the filter, and the report says why it is not sampled", () => {
    // receiver filter model (engine/readout.ts): zero beyond the sampled Nyquist edge, so nothing folds back
    const p = proto({ matrix: { read: 16, phase: 16 }, oversampling: { read: 1, phase: 0 }, receiverFilter: true });
    const far = simulate(p, markerPhantom(1.6 * 0.16, 0)), none = simulate(p, phantom({
      tissues: { gel: tissue("1000 ms", "100 ms") },
      shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["3 cm", "2 cm"], tissue: "gel" }],
    }));
    expect(relDiff(far.mag, none.mag)).toBeLessThan(1e-12);
    expect(far.iso.notes.join(" ")).toMatch(/receiver filter still passes signal.*"marker"/);
  });

  it("3D: a marker 1.6 × slab from the centre along slice encoding (non-selective pulse) folds like any other axis", () => {
    const thk = 0.005, n = 4, slab = n * thk, z = 1.6 * slab, z2 = fold(z, slab);
    const p = proto({
      sequence: "gre3d", matrix: { read: 16, phase: 16, slice: n }, slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" },
      oversampling: { read: 2, phase: 0 }, te: "5 ms", tr: "20 ms", flip: "20 deg", spoiling: "ideal",
    });
    const far = simulate(p, markerPhantom(0.04, 0, z)), near = simulate(p, markerPhantom(0.04, 0, z2));
    expect(far.iso.extent.slice[1]).toBeGreaterThan(z);
    // shape faces off the cell boundaries, so both grids see the same partial volumes
    expect(relDiff(far.mag, near.mag)).toBeLessThan(1e-9);
  });
});

describe("a limit that cuts tissue is named, never silent", () => {
  it("a 2D shape on a coronal plane is unbounded along z: the warning names it and the range kept", () => {
    const p = proto({ slice: { thickness: "5 mm", position: "0 mm", orientation: "coronal" }, matrix: { read: 16, phase: 16 } });
    const ph = phantom({
      tissues: { gel: tissue("1000 ms", "100 ms") },
      shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["3 cm", "2 cm"], tissue: "gel", label: "long tube" }],
    });
    const iso = makeIsochromats(ph, {
      axes: logicalAxes(p), dx: 0.01, dy: 0.01, thickness: p.slice.thickness, position: 0, ...sampledLimits(p),
    }, p.field, { ...defaultIsochromatOptions(), density: 1, sliceCount: 1, sliceExtent: 1 });
    expect(iso.warnings.join(" ")).toMatch(/reaches unbounded but is sampled only within ±\d+\.\d cm: tissue of "long tube"/);
  });
});
