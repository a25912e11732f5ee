/**
 * Physics of the end-to-end core against closed forms. Small grids, hard
 * pulses and few isochromats, where the closed forms hold.
 */
import { describe, expect, it } from "vitest";
import { GAMMA, GAMMA_BAR } from "../src/constants.js";
import { rfAffine } from "../src/engine/kernels.js";
import { makePulse } from "../src/sequence/rf.js";
import { centreSample, discPhantom, simulate } from "./helpers.js";

const gel = { pd: 1, t1: "800 ms", t2: "90 ms", t2star: "90 ms", species: "water" };

function baseProtocol(over: Record<string, unknown> = {}): Record<string, unknown> {
  return {
    sequence: "gre", field: "1.5 T",
    fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 16, phase: 16 },
    slice: { thickness: "5 mm" }, bandwidth: "500 Hz/px",
    te: "3 ms", tr: "20 ms", flip: "30 deg",
    excitation: { shape: "hard", duration: "0.1 ms", steps: 10 },
    refocusing: { shape: "hard", duration: "0.2 ms", steps: 20 },
    dummyScans: 300,
    ...over,
  };
}

describe("spoiled gradient echo", () => {
  // Ernst & Anderson 1966 (Rev Sci Instrum 37:93): S = M0 sinα (1−E1)/(1−E1 cosα) · e^(−TE/T2*).
  // Here T2* = T2 (no B0 spread), and the k = 0 sample is the object's total transverse magnetization.
  const T1 = 0.8, T2 = 0.09, TR = 0.02, TE = 0.003;
  const E1 = Math.exp(-TR / T1);
  const ernstAngle = (Math.acos(E1) * 180) / Math.PI; // cos α_E = E1 (Ernst & Anderson 1966)
  for (const flipDeg of [5, ernstAngle, 30, 70]) {
    it(`steady-state signal at ${flipDeg.toFixed(2)}° matches the Ernst equation within 0.2 %`, () => {
      const r = simulate(baseProtocol({ flip: `${flipDeg} deg` }), discPhantom(4, gel), { density: 1, sliceCount: 1 });
      const a = (flipDeg * Math.PI) / 180;
      const ernst = (Math.sin(a) * (1 - E1)) / (1 - E1 * Math.cos(a)) * Math.exp(-TE / T2);
      const s = centreSample(r).abs / r.m0Total;
      expect(Math.abs(s / ernst - 1)).toBeLessThan(2e-3);
    }, 60_000);
  }
  it("the Ernst angle gives the largest signal of the flip angles tried", () => {
    const sig = (deg: number) => {
      const r = simulate(baseProtocol({ flip: `${deg} deg` }), discPhantom(4, gel), { density: 1, sliceCount: 1 });
      return centreSample(r).abs / r.m0Total;
    };
    const at = sig(ernstAngle), below = sig(ernstAngle - 3), above = sig(ernstAngle + 3);
    expect(at).toBeGreaterThan(below);
    expect(at).toBeGreaterThan(above);
  }, 60_000);
});

describe("spin echo", () => {
  // Spin echo with finite TR, ideal pulses (Haacke et al. 1999, ch. 8; Bernstein, King & Zhou 2004):
  // S = M0 [1 − 2e^(−(TR − TE/2)/T1) + e^(−TR/T1)] e^(−TE/T2).
  for (const [teMs, trMs] of [[20, 500], [60, 1000], [100, 300]] as const) {
    it(`signal at TE ${teMs} ms, TR ${trMs} ms matches the spin-echo formula within 0.5 %`, () => {
      const r = simulate(
        baseProtocol({ sequence: "se", te: `${teMs} ms`, tr: `${trMs} ms`, flip: "90 deg", dummyScans: 4 }),
        discPhantom(4, gel), { density: 1, sliceCount: 1 },
      );
      const TE = teMs / 1000, TR = trMs / 1000;
      const expected = (1 - 2 * Math.exp(-(TR - TE / 2) / 0.8) + Math.exp(-TR / 0.8)) * Math.exp(-TE / 0.09);
      expect(Math.abs(centreSample(r).abs / r.m0Total / expected - 1)).toBeLessThan(5e-3);
    }, 60_000);
  }

  it("refocuses a static field inhomogeneity that dephases the gradient echo", () => {
    // A B0 gradient of 240 Hz across the 8 cm object dephases a gradient echo at TE = 17 ms
    // (the k = 0 sample loses most of its magnitude) but a spin echo refocuses it: static
    // off-resonance phase cancels at the echo (Hahn 1950, Phys Rev 80:580).
    // Pulses of 20/40 µs keep off-resonance during the RF itself negligible (ideal pulses in the closed form).
    const inhom = "3000 * y"; // Hz, y in m: ±120 Hz over ±4 cm (TE chosen so isochromat phases do not alias to 2π multiples)
    const short = { excitation: { shape: "hard", duration: "0.02 ms", steps: 10 }, refocusing: { shape: "hard", duration: "0.04 ms", steps: 20 } };
    const se = (b0?: string) =>
      simulate(baseProtocol({ sequence: "se", te: "17 ms", tr: "500 ms", flip: "90 deg", dummyScans: 2, ...short }), discPhantom(4, gel, b0), {
        density: 2, sliceCount: 1,
      });
    const gre = (b0?: string) =>
      simulate(baseProtocol({ te: "17 ms", tr: "500 ms", flip: "90 deg", dummyScans: 2, ...short }), discPhantom(4, gel, b0), { density: 2, sliceCount: 1 });
    const seRatio = centreSample(se(inhom)).abs / centreSample(se()).abs;
    const greRatio = centreSample(gre(inhom)).abs / centreSample(gre()).abs;
    expect(Math.abs(seRatio - 1)).toBeLessThan(2e-4);
    expect(greRatio).toBeLessThan(0.5);
  }, 60_000);
});

describe("RF pulses", () => {
  // A hard pulse on resonance rotates M about the B1 axis by α = γ·B1·τ (Bloch 1946; Haacke et al. 1999, ch. 2).
  for (const deg of [10, 90, 180, 270]) {
    it(`a ${deg}° hard pulse tips M0 by γ·B1·τ`, () => {
      const tau = 1e-3, steps = 50;
      const b1 = (deg * Math.PI) / 180 / (GAMMA * tau); // T, from α = γB1τ
      const re = new Float64Array(steps).fill(b1), im = new Float64Array(steps);
      const out = new Float64Array(12);
      rfAffine(out, 0, re, im, tau / steps, GAMMA, 0, 0, 0);
      const a = (deg * Math.PI) / 180;
      // M0 = (0, 0, 1) → column 2 of A: B1 along x tips M toward +y in this program's convention (dM/dt = γM×B).
      expect(out[2]).toBeCloseTo(0, 12);
      expect(out[5]).toBeCloseTo(Math.sin(a), 12);
      expect(out[8]).toBeCloseTo(Math.cos(a), 12);
      // and the pulse builder's amplitude is exactly that B1
      const p = makePulse(0, "hard", { shape: "hard", duration: tau, tbw: 1, steps }, a, 0.005, 0);
      expect(p.b1re[0]! / b1).toBeCloseTo(1, 12);
    });
  }

  it("a windowed-sinc pulse selects a slice whose FWHM matches the prescribed thickness within 5 %", () => {
    // Slice profile of a small-tip sinc: FWHM ≈ Δz = BW/(γ̄·G) (Bernstein, King & Zhou 2004, ch. 2, sec. 2.3).
    const thickness = 0.005;
    for (const position of [0, 0.01]) {
      const p = makePulse(0, "exc", { shape: "sinc", duration: 2e-3, tbw: 4, steps: 400 }, (30 * Math.PI) / 180, thickness, position);
      const zs: number[] = [], mxy: number[] = [];
      const out = new Float64Array(12);
      for (let z = position - 2 * thickness; z <= position + 2 * thickness; z += thickness / 400) {
        rfAffine(out, 0, p.b1re, p.b1im, p.dt, GAMMA, GAMMA_BAR * p.gradient * z, 0, 0);
        zs.push(z);
        mxy.push(Math.hypot(out[2]!, out[5]!));
      }
      const peak = Math.max(...mxy);
      const above = zs.filter((_, i) => mxy[i]! >= peak / 2);
      const fwhm = above[above.length - 1]! - above[0]!;
      const centre = (above[above.length - 1]! + above[0]!) / 2;
      expect(Math.abs(fwhm / thickness - 1)).toBeLessThan(0.05);
      expect(Math.abs(centre - position)).toBeLessThan(thickness * 0.01);
    }
  });
});
