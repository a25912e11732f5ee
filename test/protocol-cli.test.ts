/**
 * `isofold protocol`: the derived table for every bundled preset (the
 * command's action run in-process through commander), --json and the
 * one-line error with exit code 2 from the compiled CLI.
 */
import { describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { resolve } from "node:path";
import { listPresets } from "../src/cli/inputs.js";
import { protocolInProcess } from "./helpers.js";

const CLI = resolve(__dirname, "../dist/src/cli/index.js");

const inProcess = protocolInProcess;

describe("isofold protocol", () => {
  it("prints the derived table for every preset", async () => {
    for (const preset of listPresets()) {
      const out = await inProcess(preset);
      for (const key of ["totalBandwidth", "halfBandwidth", "fatShiftRead", "pixelBandwidth", "dwell", "deltaKRead", "kMaxPhase", "teMin", "trMin", "scanTime", "relativeSnr", "peakGradientRead", "phaseEncodeTable", "readoutDuration", "prephaserDuration", "readGradient"]) {
        expect(out, `${preset} lacks ${key}`).toContain(key);
      }
    }
    expect(await inProcess("rare-t2-1.5t")).toMatch(/effectiveTe\s+96 ms/);
    expect(await inProcess("epi-1.5t")).toMatch(/echoSpacing\s+0\.81188 ms/);
    // one slice-shift formula, with its sign, shared with report.json (analysis SLICE_SHIFT_FORMULA); a spin echo
    // also states the refocused slab's shift (its own gradient: SLICE_SHIFT_SPIN_ECHO)
    expect(await inProcess("gre-t1-3t")).toMatch(/fatShiftSlice\s+\S+ mm\s+Δz = −Δf\/\(γ̄·G_slice\)/);
    const se = await inProcess("se-t2-1.5t");
    expect(se).toMatch(/fatShiftSlice\s+\S+ mm\s+spin echo: the excited slab moves by Δz = −Δf\/\(γ̄·G_excitation\)/);
    expect(se).toMatch(/fatShiftSliceRefocused\s+\S+ mm\s+refocused slab: Δz = −Δf\/\(γ̄·G_refocusing\)/);
    // 4-shot EPI: effective echo spacing ESP/4 and the phase shift Δf·N·ESP/shots (Jezzard & Balaban 1995)
    const four = await inProcess("epi-4shot-3t");
    const esp = Number(/\bechoSpacing\s+([\d.]+) ms\s+2·ramp/.exec(four)![1]);
    const eff = Number(/effectiveEchoSpacing\s+([\d.]+) ms/.exec(four)![1]);
    expect(eff).toBeCloseTo(esp / 4, 4);
    expect(four).toMatch(/fatShiftPhase\s+-?[\d.]+ px\s+EPI: Δy = s_blip·Δf·N_phase·ESP\/shots/);
    expect(await inProcess("se-t1-multislice-1.5t")).toMatch(/sliceOrder\s+1, 3, 5, 7, 9, 11, 2, 4, 6, 8, 10/);
  });

  it("--reference: SNR relative to another protocol, here √(48/64) for partial Fourier with 0.75 of the phase lines", async () => {
    expect(await inProcess("epi-se-1.5t", "--reference", "epi-1.5t")).toMatch(/snrVsReference\s+0\.86603/);
  });

  it("--json holds SI values, the derived quantities and the phase-encode table", async () => {
    const o = JSON.parse(await inProcess("rare-t2-1.5t", "--json", "--set", "te=80 ms"));
    expect(o.derived.effectiveTe.value).toBeCloseTo(0.08, 12);
    expect(o.phaseTable.length).toBe(128);
    expect(o.protocol.te).toBeCloseTo(0.08, 12);
  });

  it("compiled CLI, impossible protocol: exit 2, one line on stderr naming the key and a value that works, nothing on stdout", () => {
    const r = spawnSync(process.execPath, [CLI, "protocol", "se-t1-multislice-1.5t", "--set", "slices.count=40"], { encoding: "utf8" });
    expect(r.status).toBe(2);
    expect(r.stdout).toBe("");
    expect(r.stderr.trim().split("\n")).toHaveLength(1);
    expect(r.stderr).toMatch(/slices\.count: 40 slices .* do not fit .* or slices\.count to at most 25/);
  }, 60_000);
});
