/**
 * isofold sweep: --vary parsing, bad input (one line, exit 2, nothing
 * written), and a small grid with an impossible point, checked against the
 * closed-form fat shift Δf/BW_px (Δf = 3.4 ppm · γ̄ · B0, γ̄ = 42.577 MHz/T,
 * CODATA 2018; fat peak at −3.4 ppm from Hamilton et al. 2011, NMR Biomed 24:784).
 */
import { spawnSync } from "node:child_process";
import { existsSync, readFileSync, readdirSync } from "node:fs";
import { join, resolve } from "node:path";
import { describe, expect, it } from "vitest";
import { grid, parseVary } from "../src/cli/sweep.js";
import { tempDir } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");
const cli = (args: string[]) => spawnSync(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8" });

describe("--vary parsing", () => {
  it("spaces steps values evenly, ends included, in the unit written", () => {
    expect(parseVary("te=5ms..20ms:4")).toMatchObject({ key: "te", unit: "ms", values: [5, 10, 15, 20] });
    expect(parseVary("bandwidth=100 Hz/px..400 Hz/px:3").values).toEqual([100, 250, 400]);
    expect(parseVary("matrix.read=32..64:3").values).toEqual([32, 48, 64]);
    expect(parseVary("te=5 ms..5 ms:1").values).toEqual([5]);
  });

  it("rejects from > to, zero or fractional steps, mixed units, and a missing range", () => {
    expect(() => parseVary("te=20ms..5ms:4")).toThrow(/above to.*te=5ms\.\.20ms:4/);
    expect(() => parseVary("te=5ms..20ms:0")).toThrow(/steps must be a whole number of at least 1/);
    expect(() => parseVary("te=5ms..20ms:2.5")).toThrow(/steps/);
    expect(() => parseVary("te=5ms..0.02s:4")).toThrow(/same unit/);
    expect(() => parseVary("te=5ms")).toThrow(/from\.\.to:steps/);
    expect(() => parseVary("te=5ms..20ms:1")).toThrow(/1 step needs from = to/);
  });

  it("grid: every combination once, the first --vary fastest", () => {
    const g = grid([parseVary("te=5ms..10ms:2"), parseVary("flip=10deg..30deg:3")]);
    expect(g).toEqual([[5, 10], [10, 10], [5, 20], [10, 20], [5, 30], [10, 30]]);
  });
});

describe("isofold sweep", () => {
  const bad: [string, string[], RegExp][] = [
    ["an unknown key", ["--vary", "echo=5ms..20ms:4"], /--vary echo: .*unknown key/],
    ["a range without units", ["--vary", "te=5..20:4"], /--vary te: .*units/],
    ["from > to with positive steps", ["--vary", "te=20ms..5ms:4"], /above to/],
    ["zero steps", ["--vary", "te=5ms..20ms:0"], /steps must be/],
    ["no --vary", [], /at least one --vary/],
  ];
  for (const [what, args, msg] of bad) {
    it(`${what}: one line on stderr, exit 2, nothing written`, () => {
      const out = join(tempDir(), "sweep");
      const r = cli(["sweep", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t", ...args, "-o", out, "-q"]);
      expect(r.status).toBe(2);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(msg);
      expect(existsSync(out)).toBe(false);
    });
  }

  it("runs the grid, lists the impossible point with its reason, and writes csv, montage, plots and html", () => {
    const out = join(tempDir(), "sweep");
    const r = cli(["sweep", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t", "--set", "matrix.read=32", "--set", "matrix.phase=32",
      "--vary", "bandwidth=100Hz/px..200Hz/px:2", "--vary", "te=5ms..8ms:2", "--fat-model", "single",
      "--t2prime-isochromats", "1", "--density", "1", "--workers", "1", "-q", "-o", out]);
    // warnings once each at the end (the runs share them), no error
    const warn = r.stderr.trim().split("\n").filter((l) => l !== "");
    expect(warn.every((l) => l.startsWith("warning: "))).toBe(true);
    expect(new Set(warn).size).toBe(warn.length);
    expect(r.status).toBe(0);
    const lines = readFileSync(join(out, "sweep.csv"), "utf8").trim().split("\n");
    const head = lines[0]!.split(",");
    expect(head.slice(0, 4)).toEqual(["point", "status", "bandwidth (Hz/px)", "te (ms)"]);
    expect(head).toContain("fatShiftReadPredicted (px)");
    const rows = lines.slice(1).map((l) => l.split(","));
    expect(rows).toHaveLength(4);
    // TE 5 ms is below the minimum at 100 Hz/px (readout of 10 ms): impossible, with the reason
    const p1 = rows[0]!;
    expect(p1.slice(0, 4)).toEqual(["1", "impossible", "100", "5"]);
    expect(lines[1]).toMatch(/below the minimum/);
    const col = head.indexOf("fatShiftReadPredicted (px)");
    const gammaBar = 42.577478518e6; // Hz/T, CODATA 2018
    for (const row of rows.filter((x) => x[1] === "done")) {
      const bw = Number(row[2]);
      // Δf/BW_px, read polarity positive: fat (lower frequency) moves toward −read
      expect(Math.abs(Number(row[col]))).toBeCloseTo((3.4e-6 * gammaBar * 1.5) / bw, 3);
    }
    const files = readdirSync(out);
    expect(files).toEqual(expect.arrayContaining(["sweep.csv", "montage.png", "sweep.html", "plot-fatShiftReadPredicted-vs-bandwidth.svg", "plot-roiMean-vs-te.svg"]));
    expect(files.filter((f) => f.startsWith("point-"))).toHaveLength(3);
    const svg = readFileSync(join(out, "plot-fatShiftReadPredicted-vs-bandwidth.svg"), "utf8");
    expect(svg).toMatch(/^<svg[^>]*class="marks"/); // rendered by vega
    const png = readFileSync(join(out, "montage.png"));
    expect(png.includes(Buffer.from("tEXtDescription\0Simulated image"))).toBe(true);
  });
});

describe("a TE sweep keeps one T2′ model", () => {
  it("auto takes the closed form at every point once any point needs it: ROI means follow exp(−ΔTE/T2*) without a step", async () => {
    // a uniform square, T2 100 ms, T2* 50 ms (T2′ 100 ms); ideally spoiled GRE, TE 8…24 ms. At 8 ms a spread of 16 is
    // within 5 % (auto alone would keep it), at 24 ms it is not. In closed form the centre signal is
    // S(TE) ∝ exp(−TE/T2*) (spoiled gradient echo; common practice), so successive ROI means fall by exp(−ΔTE/T2*).
    const { runSweep, parseVary } = await import("../src/cli/sweep.js");
    const { isoOptions } = await import("../src/cli/options.js");
    const { writeJson } = await import("./helpers.js");
    const dir = tempDir();
    const t2star = 1 / (1 / 0.1 + 1 / 0.1);
    const ph = writeJson(dir, "square.json", {
      name: "square", tissues: { t: { pd: 1, t1: "1000 ms", t2: "100 ms", t2star: `${t2star * 1e3} ms`, species: "water" } },
      shapes: [{ shape: "rectangle", center: ["0 cm", "0 cm"], size: ["20 cm", "20 cm"], tissue: "t" }],
    });
    // the premise: alone, auto keeps the spread at the first point and takes the closed form at the last
    const { t2primeClosedTissues } = await import("../src/api.js");
    const { libraryInput } = await import("../src/cli/pipeline.js");
    const sets = ["matrix.read=16", "matrix.phase=16", "tr=60 ms", "spoiling=ideal"];
    const iso = { ...isoOptions({ density: 1, sliceIsochromats: 3, sliceExtent: 3, fatModel: "multi" }), t2primeModel: "auto" as const };
    const alone = (te: string) => t2primeClosedTissues(libraryInput({ phantom: ph, protocol: "gre-demo-1.5t", sets: [...sets, `te=${te}`], out: dir, seed: 1, iso }))[0];
    expect(alone("8 ms")).toBe(false);
    expect(alone("24 ms")).toBe(true);
    const logs: string[] = [];
    const out = join(dir, "sweep");
    await runSweep({
      phantom: ph, protocol: "gre-demo-1.5t", sets, varies: [parseVary("te=8ms..24ms:3")], out,
      base: { seed: 1, iso, workers: 1 }, log: (l) => logs.push(l),
    });
    expect(logs.some((l) => l.includes("T2′ in closed form"))).toBe(true);
    const rows = readFileSync(join(out, "sweep.csv"), "utf8").trim().split("\n");
    const head = rows[0]!.split(","), col = head.findIndex((h) => h.startsWith("roiMean"));
    const roi = rows.slice(1).map((r) => Number(r.split(",")[col]));
    expect(roi).toHaveLength(3);
    for (let i = 1; i < 3; i++) expect(roi[i]! / roi[i - 1]!).toBeCloseTo(Math.exp(-0.008 / t2star), 2);
    for (const p of ["point-1", "point-2", "point-3"]) {
      const rep = JSON.parse(readFileSync(join(out, p, "report.json"), "utf8")) as { isochromats: { t2primeSpread: { model: string }[] } };
      expect(rep.isochromats.t2primeSpread[0]!.model).toBe("closed form");
    }
  }, 60_000);
});
