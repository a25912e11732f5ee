/**
 * The physical noise model (--noise-model physical --snr-reference P --snr x).
 * Outside references: SNR ∝ voxel volume · √(averages · phase lines ·
 * slice-encoding steps · readout duration) (W. A. Edelstein et al., Magn.
 * Reson. Med. 3 (1986) 604–618; common practice) and SNR ∝ B0 in the
 * sample-noise-dominated regime (D. I. Hoult, R. E. Richards, J. Magn. Reson.
 * 24 (1976) 71–85; common practice). Each protocol is a variant of one small
 * base protocol, so the expected σ ratio is written out from these laws by hand.
 */
import { afterAll, describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { Command } from "commander";
import { registerDataset } from "../src/cli/dataset.js";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const CLI = join(root, "dist", "src", "cli", "index.js");
const tmp = mkdtempSync(join(tmpdir(), "isofold-physnoise-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));
const PHANTOM = join(root, "phantoms", "two-bottle.json");

function protocol(name: string, extra: Record<string, unknown>): string {
  const file = join(tmp, `${name}.json`);
  writeFileSync(file, JSON.stringify({
    extend: "gre-demo-1.5t", fov: { read: "12 cm", phase: "12 cm" }, matrix: { read: 16, phase: 16 }, dummyScans: 2, ...extra,
  }));
  return file;
}

async function sigmaOf(proto: string, args: string[]): Promise<{ sigma: number; json: Record<string, any> }> {
  const out = join(tmp, `out-${Math.random().toString(36).slice(2)}`);
  const program = new Command();
  registerDataset(program);
  const log = console.log;
  console.log = () => {};
  try {
    await program.parseAsync(["dataset", PHANTOM, "-p", proto, "--slice-isochromats", "2", "-q", "--format", "npy", "-o", out, ...args], { from: "user" });
  } finally {
    console.log = log;
  }
  const json = JSON.parse(readFileSync(join(out, "case-0000", "case.json"), "utf8"));
  return { sigma: json.noise.sigma, json };
}

describe("physical noise model", () => {
  const base = protocol("base", {});

  it("the reference protocol itself gets exactly the SNR asked for (same σ as --snr alone)", async () => {
    const plain = await sigmaOf(base, ["--snr", "25"]);
    const phys = await sigmaOf(base, ["--snr", "25", "--noise-model", "physical", "--snr-reference", base]);
    expect(phys.sigma / plain.sigma).toBeCloseTo(1, 12);
    expect(phys.json.noise.physical.snrResulting).toBeCloseTo(25, 4);
    expect(phys.json.noise.noiseModel).toMatch(/^physical/);
    expect(plain.json.noise.noiseModel).toMatch(/^snr/);
  });

  it("σ follows voxel volume, √averages, √phase lines, √readout duration and B0 (σ ratios against the laws above)", async () => {
    const ref = ["--snr", "25", "--noise-model", "physical", "--snr-reference", base];
    const s0 = (await sigmaOf(base, ref)).sigma;
    // twice the slice thickness and 4 averages: SNR × 2 · √4 = 4 → σ / 4 (same image grid, so the same N)
    const thick = (await sigmaOf(protocol("thick", { slice: { thickness: "10 mm", position: "0 mm", orientation: "axial" }, averages: 4 }), ref)).sigma;
    expect(thick / s0).toBeCloseTo(1 / 4, 10);
    // twice the phase lines over twice the phase FOV (same voxel): SNR × √2 in the image, but the image grid has twice the
    // points (σ per sample = σ_img·√N), so the noise per k-space sample stays the same, as it must at the same dwell time
    const wide = (await sigmaOf(protocol("wide", { fov: { read: "12 cm", phase: "24 cm" }, matrix: { read: 16, phase: 32 } }), ref)).sigma;
    expect(wide / s0).toBeCloseTo(1, 10);
    // twice the pixel bandwidth: readout half as long → SNR / √2
    const fast = (await sigmaOf(protocol("fast", { bandwidth: "200 Hz/px" }), ref)).sigma;
    expect(fast / s0).toBeCloseTo(Math.SQRT2, 10);
    // 3 T instead of 1.5 T: SNR × 2 (β = 1); the tissue signal changes with the field, the noise does not depend on it
    const high = (await sigmaOf(protocol("high", { field: "3 T" }), ref)).sigma;
    expect(high / s0).toBeCloseTo(1 / 2, 10);
  }, 60000);

  it("bad input: physical without a reference, or a covariance for another coil count: one line, exit 2, nothing written", () => {
    const cov = join(tmp, "cov3.json");
    writeFileSync(cov, "[[1,0,0],[0,1,0],[0,0,1]]");
    const cases: [string[], RegExp][] = [
      [["--noise-model", "physical", "--snr", "20"], /--noise-model.*--snr-reference/],
      [["--noise-model", "physical", "--snr-reference", base], /--noise-model/],
      [["--snr-reference", base, "--snr", "20"], /--snr-reference/],
      [["--coils", "4", "--noise-covariance", cov, "--snr", "20"], /--noise-covariance.*4×4/],
    ];
    cases.forEach(([args, pattern], i) => {
      const out = join(tmp, `bad-${i}`);
      const r = spawnSync(process.execPath, [CLI, "dataset", PHANTOM, "-p", base, "-q", "-o", out, ...args], { encoding: "utf8" });
      expect([args.join(" "), r.status]).toEqual([args.join(" "), 2]);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(pattern);
      expect(existsSync(out)).toBe(false);
    });
  });
});
