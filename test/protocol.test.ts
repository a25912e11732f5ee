/**
 * Protocol model: units, presets with `extend`, --set, geometry (oblique axes,
 * multi-slice positions), and one-line errors for impossible combinations that
 * name the limiting quantity and a value that works.
 */
import { describe, expect, it } from "vitest";
import { logicalAxes, slicePositions } from "../src/protocol/index.js";
import { listPresets, loadProtocol } from "../src/cli/inputs.js";
import { buildSequence } from "../src/sequence/index.js";
import { UserError } from "../src/errors.js";
import { proto } from "./sequence-helpers.js";

describe("presets", () => {
  it("every bundled preset loads and builds its sequence", () => {
    const names = listPresets();
    for (const want of ["gre-t1-3t", "se-t2-1.5t", "gre3d-t1-1.5t", "bssfp-1.5t", "rare-t2-1.5t", "epi-1.5t", "epi-se-1.5t", "epi-4shot-3t", "se-t1-multislice-1.5t"]) {
      expect(names).toContain(want);
    }
    for (const n of names) expect(() => buildSequence(loadProtocol(n))).not.toThrow();
  });
  it("extend merges a preset under the file; --set overrides last", () => {
    const p = loadProtocol("epi-se-1.5t", ["te=80 ms", "partialFourier.method=zero-fill"]);
    expect(p.sequence).toBe("epi");
    expect(p.epiEcho).toBe("spin");
    expect(p.te).toBeCloseTo(0.08, 12);
    expect(p.partialFourier).toEqual({ phase: 0.75, read: 1, method: "zero-fill" });
    expect(p.matrix.read).toBe(64);
  });
});

describe("geometry", () => {
  it("oblique axes stay orthonormal and tilt the named pair (common practice: rotation about an in-plane axis)", () => {
    for (const [orientation, tiltAxis] of [["axial", "read"], ["coronal", "phase"], ["sagittal", "read"]] as const) {
      const ax = logicalAxes(proto({ slice: { orientation, angle: "20 deg", tiltAxis } }));
      const v = [ax.read, ax.phase, ax.slice];
      for (let i = 0; i < 3; i++) {
        for (let j = 0; j < 3; j++) {
          const d = v[i]![0] * v[j]![0] + v[i]![1] * v[j]![1] + v[i]![2] * v[j]![2];
          expect(d).toBeCloseTo(i === j ? 1 : 0, 12);
        }
      }
      const base = logicalAxes(proto({ slice: { orientation } }));
      const kept = tiltAxis === "read" ? [ax.read, base.read] : [ax.phase, base.phase];
      expect(kept[0]).toEqual(kept[1]);
      const cos = ax.slice[0] * base.slice[0] + ax.slice[1] * base.slice[1] + ax.slice[2] * base.slice[2];
      expect(cos).toBeCloseTo(Math.cos((20 * Math.PI) / 180), 12);
    }
  });
  it("multi-slice: centres (thickness + gap) apart about the position; interleaved order evens then odds", () => {
    const p = proto({ slice: { thickness: "4 mm", position: "10 mm" }, slices: { count: 5, gap: "1 mm", order: "interleaved" } });
    const ms = slicePositions(p);
    expect(ms.positions.map((x) => Math.round(x * 1e6) / 1e3)).toEqual([0, 5, 10, 15, 20]);
    expect(ms.order).toEqual([0, 2, 4, 1, 3]);
    expect(slicePositions(proto({ slices: { count: 3, order: "sequential" } })).order).toEqual([0, 1, 2]);
  });
});

function errorOf(f: () => unknown): UserError {
  try {
    f();
  } catch (e) {
    expect(e).toBeInstanceOf(UserError);
    expect((e as Error).message).not.toContain("\n");
    return e as UserError;
  }
  throw new Error("no error");
}

describe("impossible protocols: one line naming the quantity and what would work", () => {
  it("bandwidth beyond gmax names the largest bandwidth and the smallest FOV", () => {
    const e = errorOf(() => buildSequence(proto({ bandwidth: "5000 Hz/px", fov: { read: "4 cm" }, hardware: { gmax: "10 mT/m" } })));
    expect(e.keyPath).toBe("bandwidth");
    // G = BW/(γ̄·FOV) ≤ gmax ⇒ BW_px ≤ gmax·γ̄·FOV/N = 0.01·42.577e6·0.04/32 = 532 Hz/px
    expect(e.message).toMatch(/at most 532 Hz\/px/);
  });
  it("TE below the minimum names the minimum", () => {
    const seq = buildSequence(proto({}));
    const e = errorOf(() => buildSequence(proto({ te: "0.5 ms" })));
    expect(e.keyPath).toBe("te");
    expect(e.message).toContain(`at least ${(Math.ceil(seq.timing.teMin * 1e5 - 1e-6) / 1e2).toFixed(2)} ms`);
  });
  it("TR too short for an EPI train names the TR that fits", () => {
    const e = errorOf(() => buildSequence(proto({ sequence: "epi", te: "30 ms", tr: "40 ms", bandwidth: "2000 Hz/px" })));
    expect(e.keyPath).toBe("tr");
    expect(e.message).toMatch(/set tr to at least \d+\.\d\d ms/);
  });
  it("slice too thin for gmax names the thinnest slice", () => {
    const e = errorOf(() => buildSequence(proto({ slice: { thickness: "0.5 mm" }, excitation: { shape: "sinc", duration: "1 ms", tbw: 8 }, hardware: { gmax: "20 mT/m" } })));
    expect(e.message).toMatch(/at least 9\.39 mm/); // (8/1 ms)/(γ̄·20 mT/m)
  });
  it("matrix.partitions, the old name of matrix.slice, is still read for this release with a deprecation warning; both at once are refused", () => {
    const old = proto({ sequence: "gre3d", matrix: { read: 32, phase: 32, partitions: 8 } });
    expect(old.matrix.slice).toBe(8);
    expect(old.warnings.join("\n")).toMatch(/matrix\.partitions is deprecated.*"slice": 8/);
    const now = proto({ sequence: "gre3d", matrix: { read: 32, phase: 32, slice: 8 } });
    expect(now.matrix.slice).toBe(8);
    expect(now.warnings).toEqual([]);
    expect(errorOf(() => proto({ sequence: "gre3d", matrix: { read: 32, slice: 8, partitions: 8 } })).message).toMatch(/once, as matrix\.slice/);
  });
  it("shots that do not divide the lines, slice-encoding steps in 2D, unknown keys and sequences", () => {
    expect(errorOf(() => buildSequence(proto({ sequence: "epi", shots: 5, te: "30 ms", tr: "1 s", bandwidth: "2000 Hz/px" }))).message).toMatch(/shots that divide 32/);
    expect(errorOf(() => proto({ matrix: { slice: 8 } })).keyPath).toBe("matrix.slice");
    expect(errorOf(() => proto({ sequence: "gre3d" })).message).toMatch(/at least 2 slice-encoding steps/);
    expect(errorOf(() => proto({ sequence: "spiral" })).message).toMatch(/one of gre, se, gre3d, bssfp, rare, epi/);
    expect(errorOf(() => proto({ partialFourier: { phase: 0.3 } })).keyPath).toBe("partialFourier.phase");
    expect(errorOf(() => proto({ slice: { angle: "75 deg" } })).keyPath).toBe("slice.angle");
  });
});
