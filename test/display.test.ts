/**
 * Display orientation of the pictures: the radiological convention (common
 * practice: axial viewed from the feet, patient right on the image left,
 * anterior up; coronal from the front, superior up; sagittal from the
 * patient's left, anterior on the image left) with DICOM orientation letters
 * (DICOM PS3.3 C.7.6.1.1.1), the same whichever way phase runs. Checked on
 * the transform itself and end to end with an asymmetric phantom whose only
 * object is a marker at the patient's right-anterior.
 */
import { spawnSync } from "node:child_process";
import { readFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { describe, expect, it } from "vitest";
import { PNG } from "pngjs";
import { decodeNpy, type ComplexData } from "../src/io/npy.js";
import { displayPoint, displayTransform, toDisplay, toDisplayInPlace, type Vec3 } from "../src/report/display.js";
import { logicalAxes } from "../src/protocol/index.js";
import { tempDir, writeJson } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");

function axes(orientation: "axial" | "coronal" | "sagittal", phaseDirection: "x" | "y" | "z", angle = 0) {
  return logicalAxes({ slice: { orientation, angle, tiltAxis: "read", thickness: 0.005, position: 0 }, phaseDirection } as never);
}

describe("displayTransform", () => {
  const cases: [string, ReturnType<typeof axes>, string, string, string[]][] = [
    ["axial, phase y", axes("axial", "y"), "anterior→posterior", "right→left", ["R", "L", "A", "P"]],
    ["axial, phase x", axes("axial", "x"), "anterior→posterior", "right→left", ["R", "L", "A", "P"]],
    ["coronal, phase z", axes("coronal", "z"), "superior→inferior", "right→left", ["R", "L", "S", "I"]],
    ["coronal, phase x", axes("coronal", "x"), "superior→inferior", "right→left", ["R", "L", "S", "I"]],
    ["sagittal, phase y", axes("sagittal", "y"), "superior→inferior", "anterior→posterior", ["A", "P", "S", "I"]],
    ["sagittal, phase z", axes("sagittal", "z"), "superior→inferior", "anterior→posterior", ["A", "P", "S", "I"]],
  ];
  for (const [name, ax, rows, cols, letters] of cases) {
    it(`${name}: rows ${rows}, columns ${cols}`, () => {
      const t = displayTransform(ax);
      expect([t.rows, t.cols]).toEqual([rows, cols]);
      expect([t.letters.left, t.letters.right, t.letters.top, t.letters.bottom]).toEqual(letters);
    });
  }

  it("oblique axial tilted 20° about read: two letters on the tilted edges, largest component first", () => {
    const t = displayTransform(axes("axial", "y", (20 * Math.PI) / 180));
    expect(t.orientation).toBe("axial");
    expect([t.letters.left, t.letters.right]).toEqual(["R", "L"]);
    // phase (y) turned toward +z by 20°: up is anterior (cos 20°) and a little inferior or superior
    expect(t.letters.top).toMatch(/^A[SI]$/);
    expect(t.letters.bottom).toMatch(/^P[SI]$/);
    expect(t.letters.top[1]).not.toBe(t.letters.bottom[1]);
  });

  it("toDisplayInPlace gives toDisplay's values, width and height for every transpose and flip (odd and even sizes)", () => {
    for (const [nRead, nPhase] of [[5, 3], [4, 6], [1, 7], [6, 1]] as const) {
      const plane = Float64Array.from({ length: nRead * nPhase }, (_, i) => i * 1.5 - 7);
      for (let m = 0; m < 8; m++) {
        const t = { transpose: (m & 1) !== 0, flipRows: (m & 2) !== 0, flipCols: (m & 4) !== 0 };
        const want = toDisplay(t, plane, nRead, nPhase);
        const got = toDisplayInPlace(t, Float64Array.from(plane), nRead, nPhase);
        expect([got.width, got.height]).toEqual([want.width, want.height]);
        expect(Array.from(got.values)).toEqual(Array.from(want.values));
      }
    }
  });

  it("toDisplay puts array element (phase p, read r) at the display pixel displayPoint gives for its position", () => {
    const nRead = 6, nPhase = 4, dRead = 0.002, dPhase = 0.003;
    for (const [o, ph] of [["axial", "y"], ["axial", "x"], ["coronal", "z"], ["sagittal", "y"], ["sagittal", "z"]] as const) {
      const t = displayTransform(axes(o, ph));
      const plane = Float64Array.from({ length: nRead * nPhase }, (_, i) => i);
      const d = toDisplay(t, plane, nRead, nPhase);
      for (let p = 0; p < nPhase; p++) for (let r = 0; r < nRead; r++) {
        const q = displayPoint(t, { nRead, nPhase, dRead, dPhase }, (r - Math.floor(nRead / 2)) * dRead, (p - Math.floor(nPhase / 2)) * dPhase);
        expect(d.values[Math.floor(q.y) * d.width + Math.floor(q.x)]).toBe(p * nRead + r);
      }
    }
  });

  it("display directions are unit vectors of the logical axes, pointing the convention's way", () => {
    const t = displayTransform(axes("axial", "x"));
    const dot = (a: Vec3, b: Vec3) => a[0] * b[0] + a[1] * b[1] + a[2] * b[2];
    expect(dot(t.colDir, [-1, 0, 0])).toBeCloseTo(1, 12);
    expect(dot(t.rowDir, [0, -1, 0])).toBeCloseTo(1, 12);
  });
});

/** Mean grey level of each quadrant of a PNG: [top-left, top-right, bottom-left, bottom-right]. */
function quadrants(bytes: Buffer): number[] {
  const png = PNG.sync.read(bytes);
  const q = [0, 0, 0, 0];
  for (let y = 0; y < png.height; y++) for (let x = 0; x < png.width; x++) {
    q[(y < png.height / 2 ? 0 : 2) + (x < png.width / 2 ? 0 : 1)]! += png.data[4 * (y * png.width + x)]!;
  }
  return q;
}

describe("image.png in display orientation, image.npy in index order", () => {
  // one marker at the patient's right-anterior: x = +4 cm (RAS+: right), y = +4 cm (anterior)
  const phantom = {
    name: "marker", description: "a small bottle at the right-anterior corner",
    shapes: [{ shape: "cylinder", center: ["4 cm", "4 cm", "0 cm"], radius: "1.5 cm", length: "6 cm", axis: "z", tissue: "water-gel" }],
  };
  for (const phase of ["y", "x"] as const) {
    it(`a marker at patient right-anterior lands at image left-top (phase along ${phase})`, () => {
      const dir = tempDir();
      const ph = writeJson(dir, "marker.json", phantom);
      const out = join(dir, "run");
      const r = spawnSync(process.execPath, [CLI, "simulate", ph, "-p", "gre-demo-1.5t", "--set", "matrix.read=32", "--set", "matrix.phase=32",
        "--set", `phaseDirection=${phase}`, "--t2prime-isochromats", "1", "--density", "1", "--workers", "1", "--truth", "-q", "-o", out], { encoding: "utf8" });
      expect(r.stderr).not.toMatch(/error/);
      expect(r.status).toBe(0);
      const q = quadrants(readFileSync(join(out, "image.png")));
      expect(q[0]).toBeGreaterThan(10 * Math.max(q[1]!, q[2]!, q[3]!));
      // the ground-truth pictures are turned the same way
      const qt = quadrants(readFileSync(join(out, "truth-pd.png")));
      expect(qt[0]).toBeGreaterThan(0);
      expect(Math.max(qt[1]!, qt[2]!, qt[3]!)).toBe(0);
      const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
      expect(rep.display.rows).toBe("anterior→posterior");
      expect(rep.display.cols).toBe("right→left");
      // image.npy keeps [coil, slice, phase, read] with index n at (n − N/2)·Δ along +x / +y: the marker sits at high indices on both
      const npy = decodeNpy(readFileSync(join(out, "image.npy")));
      expect(npy.shape).toEqual([1, 1, 32, 32]);
      const { re, im } = npy.data as ComplexData;
      let best = 0, at = 0;
      for (let i = 0; i < 32 * 32; i++) {
        const m = Math.hypot(re[i]!, im[i]!);
        if (m > best) { best = m; at = i; }
      }
      const [p, rd] = [Math.floor(at / 32), at % 32];
      // marker centre 4 cm from the centre at 5 mm pixels: index 16 + 8 = 24 on both logical axes (read and phase are x and y in some order)
      expect(Math.abs(p - 24)).toBeLessThanOrEqual(3);
      expect(Math.abs(rd - 24)).toBeLessThanOrEqual(3);
    });
  }
});
