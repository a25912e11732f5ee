/**
 * An outside checker's audit: small cases of our own, each compared with a
 * closed form computed here (not by isofold), for defects found that way.
 */
import { describe, expect, it } from "vitest";
import { predictProtocolFatShift } from "../src/analysis/index.js";
import { checkProtocol } from "../src/check/index.js";
import { parsePhantom } from "../src/phantom/index.js";
import { parseProtocolObject } from "../src/protocol/index.js";
import { buildSequence } from "../src/sequence/index.js";
import { simulate } from "./helpers.js";

type Obj = Record<string, unknown>;

/**
 * Magnitude-weighted centroid along phase (pixels from the centre index) of a 2D |image| [phase][read],
 * over the rows within `half` of `around` (keeps out an EPI's N/2 ghost).
 */
function phaseCentroid(mag: Float64Array, nPhase: number, nRead: number, around: number, half: number): number {
  let s = 0, w = 0;
  for (let y = 0; y < nPhase; y++) for (let x = 0; x < nRead; x++) {
    if (Math.abs(y - Math.floor(nPhase / 2) - around) > half) continue;
    const v = mag[y * nRead + x]!;
    s += v * (y - Math.floor(nPhase / 2));
    w += v;
  }
  return s / w;
}

describe("EPI with phase oversampling: the shift along phase counts the acquired lines", () => {
  // Jezzard & Balaban 1995 (Magn. Reson. Med. 34:65): line n is read τ = ESP/shots after line n − 1 and
  // Δk_y = 1/FOV_acq apart, so an off-resonance Δf moves the image by Δf·τ/Δk_y = Δf·τ·FOV_acq, i.e.
  // Δf·τ·L pixels of FOV/M with L = M·(1 + phase oversampling) acquired lines (32 × 1.5 = 48 here), not M.
  const M = 32, L = 48;
  const protocol: Obj = {
    sequence: "epi", field: "1.5 T", fov: { read: "20 cm", phase: "20 cm" }, matrix: { read: M, phase: M },
    slice: { thickness: "5 mm" }, phaseDirection: "y", bandwidth: "2000 Hz/px", te: "40 ms", tr: "500 ms", flip: "90 deg",
    shots: 1, epiEcho: "gradient", oversampling: { read: 2, phase: 0.5 }, excitation: { shape: "hard", duration: "0.1 ms", steps: 20 },
  };
  const gel = { pd: 1, t1: "2000 ms", t2: "2000 ms", t2star: "2000 ms", species: "water" };
  const disc = (b0?: string): Obj => ({
    name: "disc", tissues: { t: gel },
    shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2.5 cm", "2.5 cm"], tissue: "t" }],
    ...(b0 ? { b0: { expression: b0 } } : {}),
  });

  it("the predicted fat shift (report.json, protocol table, check) is Δf·τ·L", () => {
    const p = parseProtocolObject(protocol as never, "p.json");
    const seq = buildSequence(p);
    const tau = seq.derived["effectiveEchoSpacing"]!.value as number;
    // fat −3.4 ppm (Hamilton et al. 2011, NMR Biomed. 24:784) at γ̄ = 42.577478 MHz/T (CODATA 2018)
    const df = -3.4e-6 * 42.577478e6 * 1.5;
    const closed = df * tau * L;
    expect(predictProtocolFatShift(p, seq).phase.px).toBeCloseTo(closed, 6);
    const ph = parsePhantom({ name: "fat", tissues: { f: { ...gel, species: "fat" } }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2 cm", "2 cm"], tissue: "f" }] }, "ph.json", p.field);
    const r = checkProtocol(ph, p, seq, {});
    expect(r.items.find((i) => i.key === "fatShiftPhase")!.value).toBeCloseTo(Math.abs(closed), 6);
  });

  it("the simulated image moves by Δf·τ·L along phase, as the B0 distortion check predicts", () => {
    const df = 150;
    const iso = { density: 1, sliceCount: 1, sliceExtent: 1, t2primeIsochromats: 1 };
    const a = simulate(protocol, disc(), iso), b = simulate(protocol, disc(String(df)), iso);
    const tau = b.seq.derived["effectiveEchoSpacing"]!.value as number;
    const closed = df * tau * L;
    expect(Math.abs(closed - df * tau * M)).toBeGreaterThan(1); // the old prediction (M lines) is far off
    // the disc (radius 4 px) and its edges within ±7 px of where it lies; its N/2 ghost lies 16 px away
    const measured = phaseCentroid(b.mag, M, M, closed, 7) - phaseCentroid(a.mag, M, M, 0, 7);
    expect(Math.abs(measured - closed)).toBeLessThan(0.15);
    const ph = parsePhantom(disc(String(df)), "ph.json", b.protocol.field);
    const item = checkProtocol(ph, b.protocol, b.seq, {}).items.find((i) => i.key === "distortionPhase")!;
    expect(item.value).toBeCloseTo(Math.abs(closed), 3);
  });
});

describe("isofold check --help states the default thresholds", () => {
  it("every key of the README's check table is listed with its watch and problem levels and unit", async () => {
    const { spawnSync } = await import("node:child_process");
    const { readFileSync } = await import("node:fs");
    const { join, resolve } = await import("node:path");
    const root = resolve(__dirname, "..");
    const help = spawnSync(process.execPath, [join(root, "dist/src/cli/index.js"), "check", "--help"], { cwd: root, encoding: "utf8" }).stdout;
    const readme = readFileSync(join(root, "README.md"), "utf8");
    const table = readme.slice(readme.indexOf("| key | what it says |"), readme.indexOf("The default ROI is"));
    // the keys are the table's first column, e.g. | `fatShiftRead`, `fatShiftSlice`, `fatShiftPhase` |
    const keys = [...table.matchAll(/^\| ([^|]+)\|/gm)].flatMap((m) => [...m[1]!.matchAll(/`(\w+)`/g)].map((k) => k[1]!));
    expect(keys.length).toBeGreaterThan(10);
    for (const k of keys) expect(help, k).toMatch(new RegExp(`^ +${k} +watch [<>] [\\d.]+(?: [a-z%]+)?, problem [<>] [\\d.]+`, "m"));
  });
});

describe("2D spoiled gradient echo: the Ernst equation averaged over the slice profile", () => {
  // Ernst & Anderson 1966 (Rev. Sci. Instrum. 37:93) per through-slice position z, with the flip angle and phase the
  // pulse gives at z: the steady state before the pulse is M0(1 − E1)/(1 − E1·cos α(z)) and the signal is that times
  // the pulse's Mz → Mxy response, summed over z (README, "Effects the image shows"). The response is integrated
  // here from the Bloch equation (Bloch 1946, Phys. Rev. 70:460) in the rotating frame, step by step, for the
  // protocol's pulse: a Hamming-windowed sinc of time–bandwidth 4 over 2 ms, 200 steps, followed by the
  // slice-rephasing lobe (half the pulse's moment).
  const T1 = 0.9, T2 = 0.1, TR = 0.02, TE = 0.005, thick = 0.005;
  function profileAveraged(flipDeg: number): number {
    const n = 200, dur = 2e-3, dt = dur / n, tbw = 4;
    const w = Array.from({ length: n }, (_, s) => {
      const t = ((s + 0.5) / n) * 2 - 1, x = (Math.PI * tbw * t) / 2;
      return (x === 0 ? 1 : Math.sin(x) / x) * (0.54 + 0.46 * Math.cos(Math.PI * t));
    });
    const sum = w.reduce((a, b) => a + b, 0), alpha = (flipDeg * Math.PI) / 180, E1 = Math.exp(-TR / T1);
    let re = 0, im = 0;
    const nz = 601, half = 1.5 * thick, dz = (2 * half) / (nz - 1);
    for (let j = 0; j < nz; j++) {
      const z = -half + j * dz, f = (z / thick) * (tbw / dur); // Hz: the slice is tbw/duration wide in frequency
      let mx = 0, my = 0, mz = 1;
      for (let s = 0; s < n; s++) {
        // rotation by −|ω|·dt about ω = (γB1, 0, 2πf) (dM/dt = γ M × B; Rodrigues' formula)
        const wx = (w[s]! / sum) * (alpha / dt), wz = 2 * Math.PI * f, om = Math.hypot(wx, wz);
        const kx = wx / om, kz = wz / om, c = Math.cos(om * dt), sn = -Math.sin(om * dt);
        const dot = kx * mx + kz * mz;
        const cx = -kz * my, cy = kz * mx - kx * mz, cz = kx * my; // k × M
        [mx, my, mz] = [mx * c + cx * sn + kx * dot * (1 - c), my * c + cy * sn, mz * c + cz * sn + kz * dot * (1 - c)];
      }
      const ph = Math.PI * f * dur; // the rephasing lobe: precession at f over −dur/2
      const m = (1 - E1) / (1 - E1 * mz);
      re += (m * (mx * Math.cos(ph) - my * Math.sin(ph)) * dz) / thick;
      im += (m * (mx * Math.sin(ph) + my * Math.cos(ph)) * dz) / thick;
    }
    return Math.hypot(re, im) * Math.exp(-TE / T2);
  }
  const ernst = (deg: number) => {
    const a = (deg * Math.PI) / 180, E1 = Math.exp(-TR / T1);
    return ((Math.sin(a) * (1 - E1)) / (1 - E1 * Math.cos(a))) * Math.exp(-TE / T2);
  };
  const protocol: Obj = {
    sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
    slice: { thickness: "5 mm" }, phaseDirection: "y", bandwidth: "250 Hz/px", te: "5 ms", tr: "20 ms", dummyScans: 200,
  };
  const disc: Obj = {
    name: "disc", tissues: { t: { pd: 1, t1: "900 ms", t2: "100 ms", t2star: "100 ms", species: "water" } },
    shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["5 cm", "5 cm"], tissue: "t" }],
  };
  /** Mean |image| over the central 7 × 7 pixels. */
  const centre = (flip: number) => {
    const r = simulate({ ...protocol, flip: `${flip} deg` }, disc, { density: 1, sliceCount: 48, sliceExtent: 3 });
    let s = 0;
    for (let y = 13; y <= 19; y++) for (let x = 13; x <= 19; x++) s += r.mag[y * 32 + x]!;
    return s / 49;
  };

  it("the image follows the profile average at 10° and 90° (3.2 × Ernst at 90°), within 2 %", () => {
    for (const flip of [10, 90]) {
      const want = profileAveraged(flip);
      expect(Math.abs(centre(flip) / want - 1), `${flip}°`).toBeLessThan(0.02);
    }
    expect(profileAveraged(90) / ernst(90)).toBeGreaterThan(3);
  });
});

describe("isofold protocol: Δk along phase with phase oversampling", () => {
  it("is 1/FOV_acq, the spacing of the phase-encode table's lines (not 1/FOV)", () => {
    // Nyquist (common practice): L = M·(1 + os) lines over FOV_acq = FOV·L/M, Δk_y = 1/FOV_acq = M/(FOV·L);
    // 32 lines, 50 % oversampling, 16 cm: 48 lines, FOV_acq 24 cm, Δk_y = 4.1667 1/m; k_max = 1/(2Δy) = 100 1/m
    const p = parseProtocolObject({
      sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
      slice: { thickness: "5 mm" }, bandwidth: "250 Hz/px", te: "8 ms", tr: "100 ms", flip: "30 deg",
      oversampling: { read: 2, phase: 0.5 },
    } as never, "p.json");
    const seq = buildSequence(p);
    const dk = seq.derived["deltaKPhase"]!.value as number;
    expect(dk).toBeCloseTo(1 / 0.24, 6);
    expect(seq.derived["kMaxPhase"]!.value as number).toBeCloseTo(100, 6);
    // the table's area step ΔA gives Δk = γ̄·ΔA (γ̄ = 42.577478 MHz/T, CODATA 2018)
    const t = seq.phaseTable.slice().sort((a, b) => a.line - b.line);
    expect(42.577478e6 * (t[1]!.area - t[0]!.area)).toBeCloseTo(dk, 3);
  });
});

describe("report.json fat shift and the truth maps of a stack: the middle slice, for both", () => {
  const tissues = {
    w: { pd: 1, t1: "500 ms", t2: "80 ms", t2star: "80 ms", species: "water" },
    f: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "60 ms", species: "fat" },
  };
  const base = {
    sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
    slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, phaseDirection: "y", bandwidth: "80 Hz/px",
    te: "10 ms", tr: "60 ms", flip: "30 deg",
  };

  it("multi-slice: the shift measured on the middle slice is Δf/BW_px (it was fitted on the first slice against the middle one's truth)", async () => {
    const { simulate: simulateApi } = await import("../src/api.js");
    // water and fat boxes only in the middle of three slices (z −6, 0, +6 mm); a water box only in the first
    const phantom = {
      name: "stack", tissues,
      shapes: [
        { shape: "box", center: ["-4 cm", "0 cm", "0 cm"], size: ["3 cm", "3 cm", "4 mm"], tissue: "w" },
        { shape: "box", center: ["4 cm", "0 cm", "0 cm"], size: ["3 cm", "3 cm", "4 mm"], tissue: "f" },
        { shape: "box", center: ["0 cm", "5 cm", "-6 mm"], size: ["3 cm", "2 cm", "4 mm"], tissue: "w" },
      ],
    };
    const r = await simulateApi({ protocol: { ...base, slices: { count: 3, gap: "1 mm" } }, phantom, iso: { fatModel: "single", t2primeIsochromats: 1, density: 1 } });
    const fat = (r.report as { fatShift: { measured: { readout: { px: number } } } }).fatShift.measured;
    // fat −3.4 ppm (Hamilton et al. 2011) at γ̄ = 42.577478 MHz/T: Δx = Δf/BW_px (Bernstein, King & Zhou 2004, ch. 11)
    const closed = (-3.4e-6 * 42.577478e6 * 1.5) / 80;
    expect(Math.abs(fat.readout.px - closed)).toBeLessThan(0.1);
  });

  it("3D, an even number of steps: the truth maps are the middle step's (a box filling 4 of its 5 mm: PD 0.8)", async () => {
    const { simulate: simulateApi } = await import("../src/api.js");
    // 4 steps of 5 mm centred on 0: step 2 (the middle, ⌊4/2⌋) spans 0 … 5 mm (README, Conventions); the box spans
    // z 0.5 … 4.5 mm, so its voxels hold 4/5 of tissue there (2/5 in the plane −2.5 … 2.5 mm through the slab centre)
    const phantom = { name: "slab", tissues, shapes: [{ shape: "box", center: ["0 cm", "0 cm", "2.5 mm"], size: ["6 cm", "6 cm", "4 mm"], tissue: "w" }] };
    const r = await simulateApi({
      protocol: { ...base, sequence: "gre3d", matrix: { read: 16, phase: 16, slice: 4 }, bandwidth: "250 Hz/px", te: "5 ms", tr: "15 ms" },
      phantom, iso: { t2primeIsochromats: 1, density: 1 },
    });
    const t = r.truth;
    // (the maps sample a voxel's partial volume on a sub-grid: within 0.05 of the overlap)
    expect(Math.abs(t.pd[8 * t.nRead + 8]! - 0.8)).toBeLessThan(0.05);
  });
});

describe("check --verify on a 2D stack: the fat shift is measured on the slice it simulated", () => {
  it("a middle slice without fat gives no measured shift (it fitted the stack centre's truth to that slice: −15.9 px)", async () => {
    const { spawnSync } = await import("node:child_process");
    const { join, resolve } = await import("node:path");
    const { tempDir, writeJson } = await import("./helpers.js");
    const dir = tempDir("isofold-audit-verify-");
    // two 5 mm slices 1 mm apart centred on z = 3 mm lie at z = 0 and 6 mm (README: slices centred on slice.position);
    // --verify simulates the middle one (index ⌊2/2⌋ = 1, z = 6 mm, covering 3.5 … 8.5 mm): the water box reaches
    // it, the fat box (z −2 … 2 mm) does not, so no fat–water shift can be measured there
    const phantom = writeJson(dir, "ph.json", {
      name: "stack", tissues: {
        w: { pd: 1, t1: "500 ms", t2: "80 ms", t2star: "80 ms", species: "water" },
        f: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "60 ms", species: "fat" },
      },
      shapes: [
        { shape: "box", center: ["-4 cm", "0 cm", "0 cm"], size: ["3 cm", "3 cm", "20 mm"], tissue: "w" },
        { shape: "box", center: ["4 cm", "0 cm", "0 cm"], size: ["3 cm", "3 cm", "4 mm"], tissue: "f" },
      ],
    });
    const protocol = writeJson(dir, "p.json", {
      sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
      slice: { thickness: "5 mm", position: "3 mm", orientation: "axial" }, slices: { count: 2, gap: "1 mm" },
      phaseDirection: "y", bandwidth: "80 Hz/px", te: "10 ms", tr: "60 ms", flip: "30 deg",
    });
    const root = resolve(__dirname, "..");
    const r = spawnSync(process.execPath, [join(root, "dist/src/cli/index.js"), "check", phantom, "-p", protocol, "--verify", "--json"], { cwd: root, encoding: "utf8" });
    expect(r.status).toBe(0);
    const rows = (JSON.parse(r.stdout) as { verify: { rows: { quantity: string; values?: { measured: number | null } }[] } }).verify.rows;
    expect(rows.find((x) => x.quantity === "fat shift along read")!.values!.measured).toBeNull();
  }, 30_000);
});

describe("isofold check, 3D: where signal beyond the slab folds along slice encoding", () => {
  it("lands on the steps the image shows (step p centred at (p − (P − 1)/2)·thickness; even P)", () => {
    // Nyquist folding along slice encoding (Δk = 1/slab; common practice): 8 steps of 4 mm tile −16 … 16 mm; a box at
    // z 20 … 30 mm, excited by a hard pulse, folds by 32 mm to −12 … −2 mm: steps 1 (−12 … −8), 2 and half of 3
    const protocol: Obj = {
      sequence: "gre3d", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 16, phase: 16, slice: 8 },
      slice: { thickness: "4 mm", position: "0 mm", orientation: "axial" }, phaseDirection: "y", bandwidth: "300 Hz/px",
      te: "5 ms", tr: "15 ms", flip: "15 deg", excitation: { shape: "hard", duration: "0.1 ms", steps: 10 },
    };
    const phantom: Obj = {
      name: "z", tissues: { w: { pd: 1, t1: "500 ms", t2: "80 ms", t2star: "80 ms", species: "water" } },
      shapes: [
        { shape: "box", center: ["0 cm", "0 cm", "0 cm"], size: ["4 cm", "4 cm", "8 mm"], tissue: "w" },
        { shape: "box", center: ["4 cm", "4 cm", "25 mm"], size: ["3 cm", "3 cm", "10 mm"], tissue: "w" },
      ],
    };
    const p = parseProtocolObject(protocol as never, "p.json");
    const r = checkProtocol(parsePhantom(phantom, "ph.json", p.field), p, buildSequence(p), {});
    const f = r.wrap.slice!.folded.find((x) => x.from === "+z")!;
    expect(f.landsPx).toEqual([1, 3]);
    expect(f.landsM![0]).toBeCloseTo(-0.01, 6); // step 1's centre
    // the image: the folded box (x, y = 4 cm: pixel 16/2 + 4) is bright in steps 1–3 only
    const img = simulate(protocol, phantom, { density: 1, sliceCount: 1, t2primeIsochromats: 1 });
    const at = (step: number) => img.mag[step * 256 + 12 * 16 + 12]!;
    const peak = Math.max(...[0, 1, 2, 3, 4, 5, 6, 7].map(at));
    expect([0, 1, 2, 3, 4, 5, 6, 7].filter((k) => at(k) > 0.3 * peak)).toEqual([1, 2, 3]);
  });
});
