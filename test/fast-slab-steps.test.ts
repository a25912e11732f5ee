/**
 * 3D spoiled gradient echo: the fast operator per slice-encoding step. Each
 * through-slab position's excitation state carries its slice-encoding phase
 * exp(−i2π kz·z), so over all lines the line factor's rank is about the number
 * of slice-encoding steps (beyond the operator's largest rank at 32 steps);
 * within one step it is the transient's low rank. The operator then runs once
 * per step. Oracle: the direct operator (every isochromat at every sample;
 * Bloch equations, Bloch 1946), on the stored isochromats and on the streamed
 * cells as the command line runs it.
 *
 * Also the T2′ model: where the spread's RF classes × readouts would exceed the
 * fast operator's line factor (a 3D slab at an everyday matrix), auto takes the
 * closed form R2* = R2 + R2′ for every tissue — the Lorentzian spread's exact
 * average in an ideally spoiled gradient echo (the Fourier transform of a
 * Lorentzian is exp(−|t|/T2′); Bracewell 2000, The Fourier Transform and Its
 * Applications, table of transforms).
 */
import { describe, expect, test } from "vitest";
import { join, resolve } from "node:path";
import { readFileSync, writeFileSync } from "node:fs";
import { spawnSync } from "node:child_process";
import { simulate, t2primeClosedTissues } from "../src/api.js";
import { serialExecutor, simulateSerial, type ReadoutReport } from "../src/engine/index.js";
import { prepare } from "../src/cli/pipeline.js";
import { defaultIsochromatOptions } from "../src/isochromats/index.js";
import { parsePhantom } from "../src/phantom/index.js";
import { r2prime } from "../src/isochromats/index.js";
import { relL2, tempDir } from "./helpers.js";

const ROOT = resolve(import.meta.dirname, "..");
const read = (f: string) => JSON.parse(readFileSync(join(ROOT, f), "utf8")) as Record<string, unknown>;

/** A 3D ideally spoiled gradient echo of 32 slice-encoding steps over a small in-plane grid. */
const protocol = {
  sequence: "gre3d", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 12, phase: 12, slice: 32 },
  slice: { thickness: "3 mm", position: "0 mm", orientation: "axial" }, bandwidth: "250 Hz/px", te: "4 ms", tr: "10 ms", flip: "20 deg",
  excitation: { shape: "sinc", duration: "1 ms", tbw: 4 }, spoiling: "ideal", dummyScans: 2,
};

describe("3D spoiled gradient echo: the fast operator per slice-encoding step", () => {
  test("streamed cells (as the command line runs it) and stored isochromats: fast against direct within the tolerance, the estimate covering the true error", async () => {
    const phantom = read("phantoms/two-bottle.json");
    const base = { protocol, phantom, iso: { density: 1, t2primeIsochromats: 1 }, executor: serialExecutor(), convergenceCheck: false };
    const direct = await simulate({ ...base, readout: "direct" });
    const fast = await simulate({ ...base, readout: "fast" });
    const r = (fast.report["engine"] as { readout: ReadoutReport }).readout;
    expect(r.operator, JSON.stringify(r)).toBe("fast");
    // the whole set of lines exceeds the line factor's largest rank: the operator ran per step
    expect(r.lineGroups).toBe(32);
    expect(r.weights).toMatch(/streamed/);
    const e = relL2(fast.kspace.re, fast.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(e).toBeLessThanOrEqual(1e-6);
    expect(r.estimate!.relL2).toBeGreaterThanOrEqual(e);
    expect(r.estimate!.relL2).toBeLessThanOrEqual(1e-6);
    // not an empty k-space: the comparison means something
    let energy = 0;
    for (let i = 0; i < direct.kspace.re.length; i++) energy += direct.kspace.re[i]! ** 2 + direct.kspace.im[i]! ** 2;
    expect(energy).toBeGreaterThan(1e-6);
    // stored isochromats (the path of per-isochromat coil runs): the same operator per step
    const file = join(tempDir(), "gre3d-32.json");
    writeFileSync(file, JSON.stringify(protocol));
    const p = prepare({
      phantom: join(ROOT, "phantoms", "two-bottle.json"), protocol: file, sets: [], out: join(tempDir(), "out"), seed: 1,
      iso: { ...defaultIsochromatOptions(), density: 1, t2primeIsochromats: 1 }, workers: 1,
    });
    const stored = simulateSerial(p.seq, p.iso, { receiverFilter: p.protocol.receiverFilter, readout: "fast" });
    expect(stored.readout.operator).toBe("fast");
    expect(stored.readout.lineGroups).toBe(32);
    const e2 = relL2(stored.kspace.re, stored.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(e2).toBeLessThanOrEqual(1e-6);
    expect(stored.readout.estimate!.relL2).toBeGreaterThanOrEqual(e2);
  }, 60_000);

  test("a looser tolerance gives a larger true error, still within it and covered by the estimate", async () => {
    const phantom = read("phantoms/two-bottle.json");
    const base = { protocol, phantom, iso: { density: 1, t2primeIsochromats: 1 }, executor: serialExecutor(), convergenceCheck: false };
    const direct = await simulate({ ...base, readout: "direct" });
    const loose = await simulate({ ...base, readout: "fast", tolerance: 1e-3 });
    const r = (loose.report["engine"] as { readout: ReadoutReport }).readout;
    expect(r.operator).toBe("fast");
    const e = relL2(loose.kspace.re, loose.kspace.im, direct.kspace.re, direct.kspace.im);
    expect(e).toBeLessThanOrEqual(1e-3);
    expect(r.estimate!.relL2).toBeGreaterThanOrEqual(e);
  }, 60_000);
});

describe("3D per slice-encoding step with receive coils (the command line's simulate --coils)", () => {
  test("three loop coils: every coil's image within the tolerance of the direct operator's", () => {
    const CLI = join(ROOT, "dist", "src", "cli", "index.js");
    const dir = tempDir();
    const args = (readout: string) => [CLI, "simulate", join(ROOT, "phantoms", "two-bottle.json"), "-p", "gre3d-t1-1.5t",
      "--set", "matrix.read=12", "--set", "matrix.phase=12", "--set", "matrix.slice=32", "--coils", "3", "--density", "1",
      "--t2prime-isochromats", "1", "--readout", readout, "--workers", "1", "-q", "-o", join(dir, readout)];
    for (const r of ["fast", "direct"]) expect(spawnSync(process.execPath, args(r), { encoding: "utf8" }).status).toBe(0);
    const rep = JSON.parse(readFileSync(join(dir, "fast", "report.json"), "utf8")) as { engine: { readout: ReadoutReport } };
    expect(rep.engine.readout.operator).toBe("fast");
    expect(rep.engine.readout.lineGroups).toBe(32);
    // coil-images.npy: [coil, slice, phase, read] complex64; the data after the header
    const data = (f: string) => {
      const b = readFileSync(join(dir, f, "coil-images.npy"));
      const hl = b.readUInt16LE(8), o = 10 + hl;
      return new Float32Array(b.buffer.slice(b.byteOffset + o, b.byteOffset + b.length));
    };
    const a = data("fast"), d = data("direct");
    expect(a.length).toBe(3 * 32 * 12 * 12 * 2);
    // every coil on its own (a coil left empty would be off by 100 %)
    const per = a.length / 3;
    for (let q = 0; q < 3; q++) {
      let n = 0, m = 0;
      for (let k = q * per; k < (q + 1) * per; k++) {
        n += (a[k]! - d[k]!) ** 2;
        m += d[k]! ** 2;
      }
      expect(m).toBeGreaterThan(0);
      // complex64 files: float32 rounding (≈ 6e-8) on top of the operator's error
      expect(Math.sqrt(n / m), `coil ${q}`).toBeLessThan(2e-6);
    }
  }, 60_000);
});

describe("T2′ model auto: the closed form where the spread would exceed the fast operator's line factor", () => {
  const torso = read("phantoms/torso-slice.json");
  test("3D slab of the torso at 64×64×32: every tissue with T2′ in closed form; the explicit spread and a 2D slice keep theirs", async () => {
    const input = { protocol: read("src/protocol/presets/gre3d-t1-1.5t.json"), sets: ["matrix.read=64", "matrix.phase=64"], phantom: torso, iso: { t2primeIsochromats: 16 } };
    const closed = t2primeClosedTissues(input);
    // every tissue with a T2′ (T2* below T2) in closed form
    const tissues = parsePhantom(torso, "torso", 1.5).tissues;
    expect(closed).toEqual(tissues.map((t) => r2prime(t.t2, t.t2star) > 0));
    expect(closed.filter(Boolean).length).toBeGreaterThan(3);
    // the explicit spread keeps it (the user's choice)
    expect(t2primeClosedTissues({ ...input, iso: { t2primeIsochromats: 16, t2primeModel: "spread" } }).some(Boolean)).toBe(false);
    // without the spread's classes beyond the line factor (2D, the same phantom and field), auto keeps its per-tissue rule:
    // fewer tissues in closed form than in 3D
    const twoD = t2primeClosedTissues({ protocol: read("src/protocol/presets/gre-t1-3t.json"), sets: [], phantom: torso, iso: { t2primeIsochromats: 16 } });
    expect(twoD.filter(Boolean).length).toBeLessThan(closed.filter(Boolean).length);
  });
});
