/**
 * A user's audit (an MR physicist and a reconstruction engineer trying the
 * command line on cases of their own): each test is a defect found that way,
 * checked against a closed form or the README's own contract.
 */
import { describe, expect, it } from "vitest";
import { checkProtocol, type CheckResult } from "../src/check/index.js";
import { UserError } from "../src/errors.js";
import { parsePhantom } from "../src/phantom/index.js";
import { parseProtocolObject } from "../src/protocol/index.js";
import { buildSequence } from "../src/sequence/index.js";
import { protocolInProcess, simulate, tempDir } from "./helpers.js";

type Obj = Record<string, unknown>;
const gel = { pd: 1, t1: "300 ms", t2: "80 ms", t2star: "80 ms", species: "water" };

function check(ph: Obj, p: Obj): CheckResult {
  const protocol = parseProtocolObject(p as never, "p.json");
  return checkProtocol(parsePhantom(ph, "ph.json", protocol.field), protocol, buildSequence(protocol), {});
}
const itemOf = (r: CheckResult, key: string) => r.items.find((i) => i.key === key)!;

describe("a phantom wholly outside the read range the receiver filter passes", () => {
  it("is a one-line input error naming the cause, not an internal error", () => {
    // README "Inputs at the edges": when nothing of the phantom is sampled, the error says so.
    // A 2 cm disc centred 50 cm off along read lies beyond the sampled read FOV (16 cm × 2);
    // the receiver filter passes nothing from there (Nyquist: |f| ≤ sampled bandwidth / 2).
    const protocol = {
      sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 16, phase: 16 },
      slice: { thickness: "5 mm" }, bandwidth: "500 Hz/px", te: "3 ms", tr: "20 ms", flip: "30 deg",
      excitation: { shape: "hard", duration: "0.1 ms", steps: 10 }, oversampling: { read: 2, phase: 0 },
    };
    const far = { name: "far", tissues: { gel }, shapes: [{ shape: "ellipse", center: ["50 cm", "0 cm"], semiAxes: ["1 cm", "1 cm"], tissue: "gel" }] };
    let err: unknown;
    try {
      simulate(protocol, far, { density: 1, sliceCount: 3, t2primeIsochromats: 1 });
    } catch (e) {
      err = e;
    }
    expect(err).toBeInstanceOf(UserError);
    expect((err as UserError).message).toMatch(/receiver filter/);
    expect((err as UserError).message).not.toMatch(/\n/);
  });
});

describe("isofold check: the smallest phase FOV without wrap, as printed, avoids the wrap", () => {
  // A rectangle 36 cm wide along phase, 256 phase lines, no oversampling. Closed form (Nyquist folding,
  // Δk = 1/FOV; pixel n at (n − N/2)·FOV/N): the top edge +v folds to v − FOV, which stays below the
  // displayed range only if v ≤ (N/2 − ½)·FOV/N, i.e. FOV ≥ 2vN/(N − 1) = 36.141 cm for v = 18 cm.
  const N = 256, v = 0.18;
  const closedForm = (2 * v * N) / (N - 1);
  const slab: Obj = {
    name: "slab", tissues: { gel },
    shapes: [{ shape: "rectangle", label: "slab", center: ["0 cm", "0 cm"], size: ["4 cm", "36 cm"], tissue: "gel" }],
  };
  const proto = (fov: string): Obj => ({
    sequence: "gre", field: "3 T", fov: { read: "24 cm", phase: fov }, matrix: { read: 64, phase: N },
    slice: { thickness: "5 mm" }, bandwidth: "250 Hz/px", te: "5 ms", tr: "20 ms", flip: "20 deg", phaseDirection: "y",
    oversampling: { read: 2, phase: 0 },
  });

  it("states a FOV at or above the closed form, and that FOV gives no folded row", () => {
    const r = check(slab, proto("30 cm"));
    const m = /no fold with fov\.phase ≥ ([\d.]+) cm/.exec(itemOf(r, "wrapPhase").reason);
    expect(m).not.toBeNull();
    const stated = Number(m![1]) / 100;
    expect(stated).toBeGreaterThanOrEqual(closedForm);
    expect(itemOf(check(slab, proto(`${m![1]} cm`)), "wrapPhase").value).toBe(0);
  });

  it("a fold narrower than a pixel names the one row it lands on (not an empty range)", () => {
    // at FOV 36.14 cm the top edge folds to 18 − 36.14 = −18.14 cm, inside row 0 (which reaches down to
    // −(N/2 + ½)·FOV/N = −18.141 cm): one row, row 0
    const w = itemOf(check(slab, proto("36.14 cm")), "wrapPhase");
    expect(w.value).toBe(1);
    const rows = /lands? on rows (-?\d+)…(-?\d+)/.exec(w.reason);
    expect(rows).not.toBeNull();
    expect([Number(rows![1]), Number(rows![2])]).toEqual([0, 0]);
  });
});

describe("README: the `isofold protocol` examples run as written", () => {
  it("each preset example prints its table; a bandwidth given as a fat shift in px gives Δf_fat/px Hz/px", async () => {
    const { readFileSync } = await import("node:fs");
    const { resolve } = await import("node:path");
    const { listPresets } = await import("../src/cli/inputs.js");
    const readme = readFileSync(resolve(__dirname, "../README.md"), "utf8");
    const presets = new Set(listPresets());
    const examples = [...readme.matchAll(/node dist\/src\/cli\/index\.js protocol (\S+)((?: --set \w[\w.]*="[^"]*")*)/g)]
      .filter((m) => presets.has(m[1]!));
    expect(examples.length).toBeGreaterThan(0);
    for (const m of examples) {
      const sets = [...m[2]!.matchAll(/--set (\w[\w.]*)="([^"]*)"/g)].flatMap((s) => ["--set", `${s[1]}=${s[2]}`]);
      const out = await protocolInProcess(m[1]!, ...sets, "--json");
      const j = JSON.parse(out) as { protocol: { field: number; pixelBandwidth: number; bandwidthAsGiven: string } };
      const px = /^([\d.]+) px$/.exec(j.protocol.bandwidthAsGiven);
      if (px) {
        // fat −3.4 ppm (Hamilton et al. 2011, NMR Biomed. 24:784) at γ̄ = 42.577 MHz/T: BW_px = Δf_fat / shift
        expect(j.protocol.pixelBandwidth).toBeCloseTo((3.4e-6 * 42.577e6 * j.protocol.field) / Number(px[1]), 1);
      }
    }
  });
});

describe("report.json fatShift.measured in EPI, where fat moves many pixels along phase", () => {
  it("the bundled two-bottle phantom: measured along phase within 0.15 px of Δf·N_phase·ESP", async () => {
    const { readFileSync } = await import("node:fs");
    const { resolve } = await import("node:path");
    const { simulate: simulateApi } = await import("../src/api.js");
    const phantom = JSON.parse(readFileSync(resolve(__dirname, "../phantoms/two-bottle.json"), "utf8")) as unknown;
    // the epi-1.5t preset, written out: 64 × 64 over 24 cm, 1500 Hz/px, single shot
    const protocol = {
      sequence: "epi", field: "1.5 T", fov: { read: "24 cm", phase: "24 cm" }, matrix: { read: 64, phase: 64 },
      slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, phaseDirection: "y", bandwidth: "1500 Hz/px",
      te: "40 ms", tr: "3000 ms", flip: "90 deg", shots: 1, epiEcho: "gradient", oversampling: { read: 2, phase: 0 },
      hardware: { gmax: "40 mT/m", slew: "150 T/m/s" },
    };
    const r = await simulateApi({ protocol, phantom, iso: { fatModel: "single", t2primeIsochromats: 1 } });
    const rep = r.report as { sequence: { derived: Record<string, { value: number }> }; fatShift: { measured: { phase: { px: number } } } };
    const esp = rep.sequence.derived["effectiveEchoSpacing"]!.value;
    // Δy = Δf·N·ESP pixels (Jezzard & Balaban 1995, Magn. Reson. Med. 34:65), fat −3.4 ppm (Hamilton et al. 2011),
    // γ̄ = 42.577 MHz/T; the blips here run so that a negative Δf moves the image toward −y (the sign the
    // independent cross-correlation of the oil and gel bottles' profiles gives: −11.25 px)
    const closedForm = -3.4e-6 * 42.577e6 * 1.5 * 64 * esp;
    expect(Math.abs(closedForm)).toBeGreaterThan(10);
    expect(Math.abs(rep.fatShift.measured.phase.px - closedForm)).toBeLessThan(0.15);
  });
});

describe("isofold dataset: input errors found at the first case", () => {
  it("--max-memory is honoured, and a refused batch leaves no folder (exit 2: nothing written)", async () => {
    const { existsSync } = await import("node:fs");
    const { join, resolve } = await import("node:path");
    const { datasetInProcess, tempDir } = await import("./helpers.js");
    const dir = tempDir("isofold-audit-user-");
    const phantom = resolve(__dirname, "../phantoms/two-bottle.json");
    const small = ["-p", "gre-demo-1.5t", "--set", "matrix.read=32", "--set", "matrix.phase=32", "--workers", "1", "-q", "--t2prime-isochromats", "1"];
    // README: --max-memory refuses a run whose estimated memory exceeds it (1 MiB is below any run's k-space and scratch)
    const mem = join(dir, "mem");
    await expect(datasetInProcess([phantom, ...small, "--max-memory", "0.001", "-o", mem])).rejects.toBeInstanceOf(UserError);
    expect(existsSync(mem)).toBe(false);
    // README: exit code 2 is a problem with the inputs, nothing written (here: no part of the phantom in the slice)
    const off = join(dir, "off");
    await expect(datasetInProcess([phantom, ...small, "--set", "slice.position=20 cm", "-o", off])).rejects.toBeInstanceOf(UserError);
    expect(existsSync(off)).toBe(false);
  });
});

describe("relative SNR against a reference protocol at another field", () => {
  it("the same protocol at 1.5 T against itself at 3 T: 0.5 (SNR ∝ B0, Hoult and Richards 1976, J. Magn. Reson. 24:71)", () => {
    const base = (field: string): Obj => ({
      sequence: "gre", field, fov: { read: "24 cm", phase: "24 cm" }, matrix: { read: 64, phase: 64 },
      slice: { thickness: "5 mm" }, bandwidth: "250 Hz/px", te: "5 ms", tr: "20 ms", flip: "20 deg", oversampling: { read: 2, phase: 0 },
    });
    const disc = { name: "d", tissues: { gel }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["5 cm", "5 cm"], tissue: "gel" }] };
    const p15 = parseProtocolObject(base("1.5 T") as never, "p15.json"), p3 = parseProtocolObject(base("3 T") as never, "p3.json");
    const r = checkProtocol(parsePhantom(disc, "ph.json", p15.field), p15, buildSequence(p15), { reference: { name: "p3", seq: buildSequence(p3), field: p3.field } });
    // same voxel, lines and readout: only the field differs (β = 1 at clinical fields, common practice)
    expect(itemOf(r, "snr").value).toBeCloseTo(0.5, 12);
  });
});

describe("units as a user writes them", () => {
  it("an angle with the degree sign reads as degrees (20° = π/9 rad); an unreadable unit names one that works", async () => {
    const { parseUnit } = await import("../src/units.js");
    expect(parseUnit("20°", { path: "flip" }, "angle").toNumber("rad")).toBeCloseTo(Math.PI / 9, 12);
    let msg = "";
    try {
      parseUnit("8 msec", { path: "te" }, "time");
    } catch (e) {
      expect(e).toBeInstanceOf(UserError);
      msg = (e as UserError).message;
    }
    // DEVELOPERS.md "Messages": a user error says what is wrong and what would work
    expect(msg).toMatch(/"5 ms"/);
  });
});

describe("isofold check: the smallest phase oversampling without wrap, as printed, avoids the wrap", () => {
  it("384 lines over 20 cm, a slab ±12.21 cm wide: the printed percentage folds nothing", () => {
    // Nyquist folding: with L acquired lines of FOV/M each, a point at v folds to v − L·FOV/M, which must land
    // outside the displayed ±FOV/2; here that needs 428 lines (11.46 %), and 11 % gives only 426
    const slab: Obj = {
      name: "slab", tissues: { gel },
      shapes: [{ shape: "rectangle", label: "slab", center: ["0 cm", "0 cm"], size: ["4 cm", "24.42 cm"], tissue: "gel" }],
    };
    const proto = (os: number): Obj => ({
      sequence: "gre", field: "1.5 T", fov: { read: "20 cm", phase: "20 cm" }, matrix: { read: 64, phase: 384 },
      slice: { thickness: "5 mm" }, bandwidth: "250 Hz/px", te: "5 ms", tr: "20 ms", flip: "20 deg", phaseDirection: "y",
      oversampling: { read: 2, phase: os },
    });
    const w = itemOf(check(slab, proto(0)), "wrapPhase");
    expect(w.value).toBeGreaterThan(0);
    const m = /phase oversampling ≥ (\d+) %/.exec(w.reason);
    expect(m).not.toBeNull();
    expect(itemOf(check(slab, proto(Number(m![1]) / 100)), "wrapPhase").value).toBe(0);
  });
});

describe("a 2D protocol with a non-selective (hard) excitation", () => {
  it("warns that the image is the projection over the sampled span, whose amplitude is --slice-extent × the Ernst value", async () => {
    const { simulate: simulateApi } = await import("../src/api.js");
    const protocol = {
      sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 16, phase: 16 },
      slice: { thickness: "5 mm" }, bandwidth: "500 Hz/px", te: "3 ms", tr: "50 ms", flip: "30 deg",
      excitation: { shape: "hard", duration: "0.1 ms", steps: 10 }, oversampling: { read: 2, phase: 0 }, dummyScans: 60,
    };
    const disc = { name: "d", tissues: { gel }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["5 cm", "5 cm"], tissue: "gel" }] };
    const r = await simulateApi({ protocol, phantom: disc, iso: { density: 1, sliceCount: 3, sliceExtent: 3, t2primeIsochromats: 1 } });
    expect(r.warnings.some((w) => /non-selective/.test(w) && /--slice-extent/.test(w))).toBe(true);
    // Ernst & Anderson 1966 (Rev. Sci. Instrum. 37:93): sinα(1 − E1)/(1 − cosα·E1)·exp(−TE/T2), T1 300 ms, T2 80 ms
    const a = Math.PI / 6, E1 = Math.exp(-0.05 / 0.3);
    const ernst = (Math.sin(a) * (1 - E1)) / (1 - Math.cos(a) * E1) * Math.exp(-0.003 / 0.08);
    const n = 16, c = 8;
    let sum = 0;
    for (let y = c - 2; y < c + 2; y++) for (let x = c - 2; x < c + 2; x++) sum += Math.hypot(r.image.re[y * n + x]!, r.image.im[y * n + x]!);
    expect(sum / 16 / (3 * ernst)).toBeCloseTo(1, 2);
  });
});

describe("simulate --coils and --max-memory", () => {
  it("the memory estimate counts the coils (it once took every simulate run for one coil)", async () => {
    const { spawnSync } = await import("node:child_process");
    const { resolve } = await import("node:path");
    const cli = resolve(__dirname, "../dist/src/cli/index.js"), dir = tempDir("isofold-coilmem-");
    // a limit of 1 MiB refuses both; the message gives the estimate
    const needs = (coils: string[]) => {
      const r = spawnSync(process.execPath, [cli, "simulate", resolve(__dirname, "../phantoms/two-bottle.json"), "-p", "gre-demo-1.5t", "--set", "matrix.read=32", "--set", "matrix.phase=32",
        "--density", "1", "--slice-isochromats", "4", "--t2prime-isochromats", "1", "--max-memory", "0.001", "-q", "-o", resolve(dir, "out"), ...coils], { encoding: "utf8" });
      expect(r.status).toBe(2);
      const m = /needs an estimated ([\d.]+) (MiB|GiB)/.exec(r.stderr);
      expect(m, r.stderr).not.toBeNull();
      return Number(m![1]) * (m![2] === "GiB" ? 1024 : 1);
    };
    const one = needs([]), eight = needs(["--coils", "8"]);
    // eight coils carry eight k-spaces and a sensitivity per isochromat and coil: more than one coil's
    expect(eight).toBeGreaterThan(one);
  });
});
