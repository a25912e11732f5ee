/**
 * `isofold simulate --coils N`: one run shows each coil's image and the coil
 * shading. Physics check: a coil's image is its sensitivity times the object
 * (reciprocity: the received signal of a spin is weighted by the coil's
 * receive field at the spin, D. I. Hoult, "The principle of reciprocity in
 * signal strength calculations — a mathematical guide", Concepts Magn.
 * Reson. 12 (2000) 173–187), so coil image / uniform-coil image ≈ S_c at the
 * pixel centre, S_c from the Biot–Savart field evaluated independently of the
 * simulation; it differs only by the variation of S_c within a voxel and
 * through the slice.
 */
import { afterAll, describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { npy } from "./npy-oracle.js";
import { PNG } from "pngjs";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const CLI = join(root, "dist", "src", "cli", "index.js");
const tmp = mkdtempSync(join(tmpdir(), "isofold-simcoils-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));
const ARGS = [
  "simulate", join(root, "phantoms", "two-bottle.json"), "-p", "gre-demo-1.5t",
  "--set", "matrix.read=24", "--set", "matrix.phase=24", "--set", "fov.read=12 cm", "--set", "fov.phase=12 cm", "--slice-isochromats", "4", "-q",
  // a wide bandwidth keeps the fat image within a quarter pixel of the oil (at 100 Hz/px the fat shift alone moves the oil image by 2 pixels)
  "--set", "bandwidth=1000 Hz/px",
];

describe("simulate --coils", () => {
  it("writes each coil's image and the sensitivities; coil image ≈ S_c × uniform-coil image on the object (within 3 %)", () => {
    const out = join(tmp, "run");
    const r = spawnSync(process.execPath, [CLI, ...ARGS, "--coils", "4", "--array-radius", "15 cm", "-o", out], { encoding: "utf8" });
    expect(r.status, r.stderr).toBe(0);
    for (const f of ["coil-images.npy", "sensitivities.npy", "coils.png", "coil-rss.png", "image.png", "kspace.npy"]) expect(existsSync(join(out, f)), f).toBe(true);
    const I = npy(join(out, "coil-images.npy")), S = npy(join(out, "sensitivities.npy")), U = npy(join(out, "image.npy"));
    expect(I.shape).toEqual([4, 1, 24, 24]);
    expect(S.shape).toEqual([4, 1, 24, 24]);
    const n = 24 * 24;
    let max = 0;
    for (let i = 0; i < n; i++) max = Math.max(max, Math.hypot(U.data[2 * i]!, U.data[2 * i + 1]!));
    let d = 0, s = 0, shadeMin = Infinity, shadeMax = 0;
    for (let c = 0; c < 4; c++) {
      for (let i = 0; i < n; i++) {
        const ur = U.data[2 * i]!, ui = U.data[2 * i + 1]!;
        if (Math.hypot(ur, ui) < 0.5 * max) continue; // inside the bottles, away from edges
        const sr = S.data[2 * (c * n + i)]!, si = S.data[2 * (c * n + i) + 1]!;
        const pr = sr * ur - si * ui, pi = sr * ui + si * ur;
        const ir = I.data[2 * (c * n + i)]!, ii = I.data[2 * (c * n + i) + 1]!;
        d += (ir - pr) ** 2 + (ii - pi) ** 2;
        s += pr ** 2 + pi ** 2;
        const m = Math.hypot(sr, si);
        shadeMin = Math.min(shadeMin, m);
        shadeMax = Math.max(shadeMax, m);
      }
    }
    expect(Math.sqrt(d / s)).toBeLessThan(0.03);
    // the shading is real: each loop sees the near side of the object more strongly than the far side
    expect(shadeMax / shadeMin).toBeGreaterThan(1.3);
    const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
    expect(rep.coils.count).toBe(4);
  }, 60000);

  it("ideally spoiled: the coil run streams its weights from the cells (no isochromat stored), coil images within the tolerance of the direct operator's", () => {
    const run = (name: string, readout: string) => {
      const out = join(tmp, name);
      const r = spawnSync(process.execPath, [CLI, ...ARGS, "--set", "spoiling=ideal", "--coils", "4", "--array-radius", "15 cm", "--readout", readout, "-o", out], { encoding: "utf8" });
      expect(r.status, r.stderr).toBe(0);
      return { rep: JSON.parse(readFileSync(join(out, "report.json"), "utf8")), img: npy(join(out, "coil-images.npy")) };
    };
    const fast = run("stream-fast", "fast"), direct = run("stream-direct", "direct");
    const rf = [fast.rep.engine.readout].flat()[0];
    expect(rf.operator).toBe("fast");
    expect(rf.weights).toMatch(/streamed/);
    // relative L2 difference of the coil images (complex64 files: float32 rounding, ~1e-7, is below the tolerance's scale)
    const a = fast.img.data, b = direct.img.data;
    expect(a.length).toBe(b.length);
    let num = 0, den = 0;
    for (let i = 0; i < a.length; i++) {
      num += (a[i]! - b[i]!) ** 2;
      den += b[i]! ** 2;
    }
    expect(den).toBeGreaterThan(0);
    expect(Math.sqrt(num / den)).toBeLessThan(2e-6);
  }, 60000);

  it("coils.png and coil-rss.png are in image.png's display orientation: the loop on the patient's left is bright on the side report.json letters L", () => {
    // Which loop is on the patient's left follows from the geometry report.json states (RAS+: left is −x), not from a stored picture;
    // which side of the picture is the patient's left, from the display letters image.png uses (radiological convention, common practice).
    const out = join(tmp, "orient");
    const r = spawnSync(process.execPath, [CLI, ...ARGS, "--set", "matrix.read=32", "--coils", "4", "--array-radius", "15 cm", "--readout", "direct", "-o", out], { encoding: "utf8" });
    expect(r.status, r.stderr).toBe(0);
    const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
    // --readout reaches the coil run, and report.json says what ran
    expect([rep.engine.readout.operator, rep.engine.readout.requested]).toEqual(["direct", "direct"]);
    const loops = rep.coils.loops as { coil: number; centreM: number[] }[];
    const left = loops.reduce((a, b) => (b.centreM[0]! < a.centreM[0]! ? b : a)).coil;
    const right = loops.reduce((a, b) => (b.centreM[0]! > a.centreM[0]! ? b : a)).coil;
    expect(rep.display.orientation).toBe("axial");
    const lSide = rep.display.letters.left.startsWith("L") ? "left" : rep.display.letters.right.startsWith("L") ? "right" : null;
    expect(lSide).not.toBeNull();
    const png = (f: string) => PNG.sync.read(readFileSync(join(out, f)));
    const image = png("image.png"), rss = png("coil-rss.png"), mosaic = png("coils.png");
    // 32 read × 24 phase; the display puts each axis where image.png has it (same width and height)
    expect([rss.width, rss.height]).toEqual([image.width, image.height]);
    expect([mosaic.width, mosaic.height]).toEqual([2 * image.width, 2 * image.height]);
    /** Mean grey of the left and right half of coil c's tile (2 per row, coil 0 top left). */
    const halves = (c: number) => {
      const w = image.width, h = image.height, ox = (c % 2) * w, oy = Math.floor(c / 2) * h;
      let l = 0, rr = 0;
      for (let y = 0; y < h; y++) {
        for (let x = 0; x < w; x++) {
          const v = mosaic.data[4 * ((oy + y) * mosaic.width + ox + x)]!;
          if (x < w / 2) l += v; else rr += v;
        }
      }
      return { left: l, right: rr };
    };
    const L = halves(left), R = halves(right);
    const bright = (hv: { left: number; right: number }, side: "left" | "right") => hv[side] > 1.2 * hv[side === "left" ? "right" : "left"];
    expect(bright(L, lSide!)).toBe(true);
    expect(bright(R, lSide === "left" ? "right" : "left")).toBe(true);
  }, 60000);

  it("bad coil options: one line, exit 2, nothing written", () => {
    const cases: [string[], RegExp][] = [
      [["--coils", "3", "--coil-rows", "2"], /--coils/],
      [["--coils", "4", "--shard", "0/2"], /--coils.*--shard/],
      [["--coils", "4", "--array-radius", "2 cm"], /--array-radius/],
    ];
    cases.forEach(([args, pattern], i) => {
      const out = join(tmp, `bad-${i}`);
      const r = spawnSync(process.execPath, [CLI, ...ARGS, ...args, "-o", out], { encoding: "utf8" });
      expect([args.join(" "), r.status]).toEqual([args.join(" "), 2]);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(pattern);
      expect(existsSync(out)).toBe(false);
    });
  });
});
