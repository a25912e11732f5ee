/**
 * The CLI end to end: the run-folder contract read back by independent
 * readers (npyjs, nifti-reader-js, pngjs), and bad input giving one line,
 * exit code 2 and no files.
 */
import { spawnSync } from "node:child_process";
import { existsSync, readFileSync, readdirSync } from "node:fs";
import { join, resolve } from "node:path";
import { describe, expect, it } from "vitest";
import npyjs from "npyjs";
import * as nifti from "nifti-reader-js";
import { NIFTI1 } from "nifti-reader-js";
import { PNG } from "pngjs";
import { tempDir, writeJson } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");

function cli(args: string[], cwd = ROOT) {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd, encoding: "utf8" });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}
function ab(buf: Buffer): ArrayBuffer {
  return buf.buffer.slice(buf.byteOffset, buf.byteOffset + buf.byteLength) as ArrayBuffer;
}

const PROTOCOL = {
  sequence: "gre", field: "3 T", fov: { read: "20 cm", phase: "15 cm" }, matrix: { read: 40, phase: 30 },
  slice: { thickness: "4 mm", orientation: "coronal" }, phaseDirection: "z", bandwidth: "400 Hz/px",
  te: "4 ms", tr: "15 ms", flip: "15 deg", oversampling: { read: 2, phase: 0 },
};

describe("isofold simulate", () => {
  it("writes the run folder: npy shapes and dtype by npyjs, NIfTI header by nifti-reader-js, PNG sizes, report", () => {
    const dir = tempDir();
    const proto = writeJson(dir, "p.json", PROTOCOL);
    const out = join(dir, "run");
    const r = cli(["simulate", "phantoms/two-bottle.json", "-p", proto, "-o", out, "--density", "1", "--slice-isochromats", "4", "-q"]);
    expect(r.code).toBe(0);
    expect(readdirSync(out).sort()).toEqual(["image.nii", "image.npy", "image.png", "kspace.npy", "kspace.png", "report.html", "report.json"]);
    // NumPy format read by npyjs (an independent reader): complex64 '<c8', [coils, slice, phase, read]
    const k = new npyjs().parse(ab(readFileSync(join(out, "kspace.npy"))));
    expect(k.dtype).toBe("c8");
    expect(k.shape).toEqual([1, 1, 30, 80]);
    const im = new npyjs().parse(ab(readFileSync(join(out, "image.npy"))));
    expect(im.dtype).toBe("c8");
    expect(im.shape).toEqual([1, 1, 30, 40]);
    // NIfTI-1 read by nifti-reader-js: dims read × phase × 1, voxel sizes in mm
    const buf = ab(readFileSync(join(out, "image.nii")));
    expect(nifti.isNIFTI1(buf)).toBe(true);
    const h = nifti.readHeader(buf) as NIFTI1;
    expect(h.dims.slice(0, 4)).toEqual([3, 40, 30, 1]);
    expect(h.pixDims[1]).toBeCloseTo(5, 5);
    expect(h.pixDims[2]).toBeCloseTo(5, 5);
    expect(h.pixDims[3]).toBeCloseTo(4, 5);
    // coronal slice, read along x, phase along z: the affine's columns point along x and z
    expect(Math.abs(h.affine[0]![0]!)).toBeCloseTo(5, 5);
    expect(Math.abs(h.affine[2]![1]!)).toBeCloseTo(5, 5);
    const png = PNG.sync.read(readFileSync(join(out, "image.png")));
    expect([png.width, png.height]).toEqual([40, 30]);
    const kpng = PNG.sync.read(readFileSync(join(out, "kspace.png")));
    expect([kpng.width, kpng.height]).toEqual([80, 30]);
    const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
    expect(rep.seed).toBe(1);
    expect(rep.protocol.te).toBeCloseTo(0.004, 12);
    expect(rep.sequence.timing.teMin).toBeLessThan(0.004);
    expect(rep.safety).toMatch(/not a medical device/);
    // stderr holds the run's warnings and nothing else (-q: no progress line)
    expect(r.stderr).toBe(rep.warnings.map((w: string) => `warning: ${w}\n`).join(""));
    expect(rep.fftConvention).toMatch(/ifftshift/);
  }, 60000);

  it("--help names every option with its unit", () => {
    const r = cli(["simulate", "--help"]);
    expect(r.code).toBe(0);
    for (const opt of ["--protocol", "--set", "--out", "--seed", "--density", "--slice-isochromats", "--slice-extent", "--fat-model"]) {
      expect(r.stdout).toContain(opt);
    }
    expect(r.stdout).toMatch(/isochromats per voxel/);
  });
});

describe("bad input", () => {
  const cases: [string, (dir: string) => string[], RegExp][] = [
    ["malformed protocol JSON", (d) => [writeRaw(d, "p.json", '{"sequence": "gre",'), "phantoms/disc.json"], /p\.json: not valid JSON at line 1, column \d+/],
    ["an unknown protocol key", (d) => [writeJson(d, "p.json", { ...PROTOCOL, echoTime: "5 ms" }), "phantoms/disc.json"], /p\.json: echoTime: unknown key/],
    ["a value without units", (d) => [writeJson(d, "p.json", { ...PROTOCOL, te: "5" }), "phantoms/disc.json"], /te: .*no units/],
    ["a value with the wrong units", (d) => [writeJson(d, "p.json", { ...PROTOCOL, te: "5 mm" }), "phantoms/disc.json"], /te: .*not a time/],
    ["a negative slice thickness", (d) => [writeJson(d, "p.json", { ...PROTOCOL, slice: { thickness: "-4 mm" } }), "phantoms/disc.json"], /slice\.thickness: must be greater than zero/],
    ["matrix 0", (d) => [writeJson(d, "p.json", { ...PROTOCOL, matrix: { read: 0, phase: 30 } }), "phantoms/disc.json"], /matrix\.read: must be at least 1/],
    ["TE below the minimum", (d) => [writeJson(d, "p.json", { ...PROTOCOL, te: "0.5 ms" }), "phantoms/disc.json"], /te: .*below the minimum [\d.]+ ms/],
    [
      "a missing tissue",
      (d) => [writeJson(d, "p.json", PROTOCOL), writeJson(d, "ph.json", { name: "x", description: "x", shapes: [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "2 cm", tissue: "unobtainium" }] })],
      /ph\.json: shapes\[0\]\.tissue/,
    ],
    [
      "a negative radius",
      (d) => [writeJson(d, "p.json", PROTOCOL), writeJson(d, "ph.json", { name: "x", description: "x", shapes: [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "-2 cm", tissue: "muscle" }] })],
      /ph\.json: shapes\[0\]\.radius/,
    ],
  ];
  for (const [what, make, pattern] of cases) {
    it(`${what}: one line naming the file and key, exit 2, nothing written`, () => {
      const dir = tempDir();
      const [proto, phantom] = make(dir);
      const out = join(dir, "run");
      const r = cli(["simulate", phantom!, "-p", proto!, "-o", out, "-q"]);
      expect(r.code).toBe(2);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(pattern);
      expect(r.stderr).not.toMatch(/\bat .*\.js:\d+/); // no stack trace
      expect(existsSync(out)).toBe(false);
      expect(readdirSync(dir).filter((f) => f.startsWith("run"))).toEqual([]);
    }, 60_000);
  }
});

import { writeFileSync } from "node:fs";
function writeRaw(dir: string, name: string, text: string): string {
  const p = join(dir, name);
  writeFileSync(p, text);
  return p;
}
