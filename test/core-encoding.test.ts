/**
 * Encoding of the end-to-end core: simulated k-space of a disc against its
 * analytic Fourier transform, the generated gradient areas against the
 * handbook relations, and phase wrap against the aliasing closed form.
 */
import { describe, expect, it } from "vitest";
import { GAMMA_BAR } from "../src/constants.js";
import { reconstructCartesian, magnitude } from "../src/recon/reconstruct.js";
import { besselJ1 } from "../src/check/measure.js";
import { discPhantom, simulate } from "./helpers.js";

describe("k-space of a uniform disc", () => {
  it("matches the analytic transform a·J1(2πa|k|)/|k| (jinc) within 2 % relative L2 over the inner half of k-space", () => {
    // Disc FT: F(k) = ρ·a·J1(2πa|k|)/|k|, F(0) = ρπa² (Shepp & Logan 1974; Bracewell, The Fourier Transform and Its Applications).
    const a = 0.04, T2 = 0.1, T1 = 0.05;
    const r = simulate(
      {
        sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
        slice: { thickness: "5 mm" }, bandwidth: "4000 Hz/px", te: "1.5 ms", tr: "600 ms", flip: "90 deg",
        excitation: { shape: "hard", duration: "0.05 ms", steps: 10 },
      },
      discPhantom(4, { pd: 1, t1: "50 ms", t2: "100 ms", t2star: "100 ms", species: "water" }),
      { density: 4, sliceCount: 1, sliceExtent: 1 },
    );
    const { seq, kspace } = r;
    const dx = 0.16 / 32, fovRead = 0.32, fovPhase = 0.16;
    const dwell = seq.derived["dwell"]!.value as number;
    const recovery = 1 - Math.exp(-0.6 / T1);
    let num = 0, den = 0;
    for (let line = 0; line < seq.kspace.phase; line++) {
      for (let j = 0; j < seq.kspace.read; j++) {
        const kx = (j - seq.centre.read) / fovRead, ky = (line - seq.centre.phase) / fovPhase;
        const kk = Math.hypot(kx, ky);
        if (kk > 0.5 * (0.5 / dx)) continue;
        const F = kk === 0 ? Math.PI * a * a : (a * besselJ1(2 * Math.PI * a * kk, 400)) / kk;
        const t = 1.5e-3 + (j - seq.centre.read) * dwell;
        // After a 90° pulse along x, Mxy = +i·Mz (dM/dt = γM×B); one isochromat per voxel area dx² has weight 1.
        const expIm = (F / (dx * dx)) * Math.exp(-t / T2) * recovery;
        const i = line * seq.kspace.read + j;
        num += kspace.re[i]! ** 2 + (kspace.im[i]! - expIm) ** 2;
        den += expIm ** 2;
      }
    }
    const rel = Math.sqrt(num / den);
    console.log(`disc k-space vs jinc: relative L2 error ${rel.toExponential(2)}`);
    expect(rel).toBeLessThan(0.02);
  }, 60000);
});

describe("gradient areas", () => {
  it("give FOV = 1/Δk and Δk = 1/(N·Δx) along read and phase, with k = 0 at the echo sample", () => {
    // Bernstein, King & Zhou 2004 (Handbook of MRI Pulse Sequences), ch. 11: k = γ̄∫G dt, FOV = 1/Δk, Δk = 1/(N·Δx).
    const r = simulate(
      {
        sequence: "gre", field: "3 T", fov: { read: "24 cm", phase: "18 cm" }, matrix: { read: 48, phase: 36 },
        slice: { thickness: "5 mm" }, bandwidth: "300 Hz/px", te: "6 ms", tr: "30 ms",
        oversampling: { read: 2, phase: 0.25 },
      },
      discPhantom(2, { pd: 1, t1: "800 ms", t2: "90 ms", t2star: "90 ms", species: "water" }),
      { density: 1, sliceCount: 1 },
    );
    const { seq } = r;
    // Walk the blocks: k accumulates from each excitation's centre.
    const kRead: number[][] = [], kPhase: number[] = [];
    let k = [0, 0];
    for (const b of seq.blocks) {
      if (b.kind === "rf") k = [0, 0];
      else if (b.kind === "free") k = [k[0]! + GAMMA_BAR * b.area[0], k[1]! + GAMMA_BAR * b.area[1]];
      else if (b.kind === "adc") {
        const line: number[] = [];
        for (let j = 0; j < b.samples; j++) line[j] = k[0]! + GAMMA_BAR * b.grad[0] * j * b.dwell;
        kRead[b.row] = line;
        kPhase[b.row] = k[1]!;
        k = [k[0]! + GAMMA_BAR * b.grad[0] * b.samples * b.dwell, k[1]!];
      }
    }
    const line = kRead[seq.centre.phase]!;
    const dkRead = line[1]! - line[0]!;
    expect(Math.abs(line[seq.centre.read]!)).toBeLessThan(1e-9 * dkRead);
    expect(1 / dkRead).toBeCloseTo(0.24 * 2, 10); // read FOV with 2× oversampling
    expect(dkRead).toBeCloseTo(1 / (96 * 0.005), 10); // Δk = 1/(N·Δx), Δx = 5 mm, 96 samples
    const dkPhase = kPhase[1]! - kPhase[0]!;
    const lines = seq.kspace.phase;
    expect(lines).toBe(46); // 36·1.25 = 45 → 46 keeps the crop centred
    expect(1 / dkPhase).toBeCloseTo((0.18 * lines) / 36, 10);
    expect(Math.abs(kPhase[seq.centre.phase]!)).toBeLessThan(1e-9 * dkPhase);
  });
});

describe("phase wrap", () => {
  it("puts an object outside the phase FOV at y − FOV (aliasing closed form)", () => {
    // Cartesian sampling with Δk = 1/FOV makes the image periodic in FOV: y' = y − n·FOV
    // (Bernstein, King & Zhou 2004, ch. 11; common practice).
    const ph = {
      name: "offset-disc", description: "test",
      tissues: { t: { pd: 1, t1: "300 ms", t2: "80 ms", t2star: "80 ms", species: "water" } },
      shapes: [{ shape: "ellipse", center: ["0 cm", "10 cm"], semiAxes: ["1.5 cm", "1.5 cm"], tissue: "t" }],
    };
    const r = simulate(
      {
        sequence: "gre", field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 32, phase: 32 },
        slice: { thickness: "5 mm" }, bandwidth: "500 Hz/px", te: "3 ms", tr: "50 ms", flip: "30 deg",
        excitation: { shape: "hard", duration: "0.05 ms", steps: 10 }, phaseDirection: "y",
      },
      ph, { density: 2, sliceCount: 1 },
    );
    const img = reconstructCartesian({ slice: 1, phase: r.seq.kspace.phase, read: r.seq.kspace.read, re: r.kspace.re, im: r.kspace.im }, r.seq.image);
    const mag = magnitude(img);
    // centroid of the rows within 2.5 cm of the brightest row (ringing elsewhere wraps circularly)
    const rows = new Float64Array(32);
    for (let y = 0; y < 32; y++) for (let x = 0; x < 32; x++) rows[y] = rows[y]! + mag[y * 32 + x]!;
    let peak = 0;
    for (let y = 1; y < 32; y++) if (rows[y]! > rows[peak]!) peak = y;
    let sy = 0, s = 0;
    for (let y = peak - 5; y <= peak + 5; y++) {
      const m = rows[((y % 32) + 32) % 32]!;
      sy += m * (y - 16) * 0.005;
      s += m;
    }
    expect(sy / s).toBeCloseTo(0.1 - 0.16, 3); // within 0.5 mm of −6 cm
  }, 60_000);
});
