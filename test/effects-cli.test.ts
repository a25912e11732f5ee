/**
 * End to end through the compiled CLI: the bundled two-bottle phantom at 3 T
 * at two readout bandwidths. report.json states the predicted and measured
 * fat shift side by side, and they agree within 0.1 px (Δx_pix = Δf/BW_pix,
 * Bernstein, King & Zhou 2004 ch. 11); --truth writes the ground-truth maps.
 */
import { execFileSync } from "node:child_process";
import { mkdtempSync, readFileSync, existsSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import { decodeNpy } from "../src/io/npy.js";

const ROOT = join(import.meta.dirname, "..");
const CLI = join(ROOT, "dist", "src", "cli", "index.js");

function run(args: string[]): string {
  return execFileSync(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8" });
}

describe("two-bottle phantom at 3 T: oil shifted along read by the predicted pixels", () => {
  for (const bw of [100, 220]) {
    test(`${bw} Hz/px: report.json predicted vs measured readout shift within 0.1 px`, () => {
      const out = mkdtempSync(join(tmpdir(), "isofold-fx-cli-"));
      run(["simulate", join(ROOT, "phantoms", "two-bottle.json"), "-p", "gre-demo-1.5t", "--set", "field=3 T", "--set", `bandwidth=${bw} Hz/px`,
        "--fat-model", "single", "--t2prime-isochromats", "4", "--slice-isochromats", "6", "-q", "-o", out, ...(bw === 100 ? ["--truth"] : [])]);
      const r = JSON.parse(readFileSync(join(out, "report.json"), "utf8")).fatShift;
      const expected = (-3.4e-6 * 42.577478518e6 * 3) / bw; // Hamilton et al. 2011 methylene shift, CODATA 2018 γ̄
      expect(r.predicted.readout.px).toBeCloseTo(expected, 6);
      expect(r.predicted.readout.direction).toBe("-x");
      expect(r.predicted.phase.px).toBe(0);
      expect(r.predicted.slice.direction).toBe("+z");
      expect(Math.abs(r.measured.readout.px - expected)).toBeLessThan(0.02); // required 0.1 px
      expect(Math.abs(r.measured.phase.px)).toBeLessThan(0.1);
      expect(r.measured.readout.mm).toBeCloseTo(r.measured.readout.px * 1.25, 6); // 16 cm / 128
      if (bw === 100) {
        for (const m of ["pd", "t1", "t2", "t2star", "df", "fatfraction", "labels"]) {
          expect(existsSync(join(out, `truth-${m}.png`))).toBe(true);
          const a = decodeNpy(readFileSync(join(out, `truth-${m}.npy`)));
          expect(a.shape).toEqual([128, 128]);
        }
        const labels = JSON.parse(readFileSync(join(out, "truth-labels.json"), "utf8"));
        expect(Object.values(labels)).toEqual(["empty", "water-gel", "oil"]);
      }
    }, 60_000);
  }
});

describe("EPI fat shift along phase", () => {
  test("the report predicts Δf·N_phase·echo spacing along phase and does not claim a measurement when the shift can wrap", () => {
    // EPI displacement along phase: Δy_pix = Δf·N_pe·esp (Jezzard & Balaban 1995; Bernstein, King & Zhou 2004 §16.1).
    const out = mkdtempSync(join(tmpdir(), "isofold-fx-epi-"));
    run(["simulate", join(ROOT, "phantoms", "two-bottle.json"), "-p", "epi-1.5t", "--set", "field=3 T",
      "--fat-model", "single", "--t2prime-isochromats", "1", "--density", "1", "-q", "-o", out]);
    const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
    const esp = rep.sequence.derived.echoSpacing.value as number;
    const n = rep.sequence.derived.phaseLines.value as number;
    const df = -3.4e-6 * 42.577478518e6 * 3; // Hamilton et al. 2011 methylene shift, CODATA 2018 γ̄
    expect(rep.fatShift.predicted.phase.px).toBeCloseTo(df * n * esp, 6);
    // |Δy| is over a quarter of the 64 lines here: the fat image may wrap, so no measured value is given
    expect(Math.abs(df * n * esp)).toBeGreaterThan(n / 4);
    expect(rep.fatShift.measured.phase).toBeNull();
    expect(rep.fatShift.measured.reason).toMatch(/exceeds a quarter of the matrix/);
  }, 60_000);
});
