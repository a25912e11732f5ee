/**
 * The closed-form shift predictions report.json and the `protocol` table use
 * (analysis: fatShiftInput / predictProtocolFatShift), checked against the
 * shift of simulated images. An off-resonance Δf is given as a uniform B0
 * offset and handed to the prediction as the equivalent chemical shift
 * ppm = Δf/(γ̄·B0), so the predicted number is the one the report prints.
 * Shifts are measured between the Δf image and the Δf = 0 image by phase
 * correlation (Kuglin & Hines 1975, helper in sequence-helpers.ts).
 */
import { describe, expect, it } from "vitest";
import { GAMMA_BAR } from "../src/constants.js";
import { fatShiftInput, predictFatShift, predictProtocolFatShift } from "../src/analysis/index.js";
import { buildSequence } from "../src/sequence/index.js";
import { probeColumn } from "../src/isochromats/index.js";
import { logicalAxes } from "../src/protocol/index.js";
import { simulateSerial } from "../src/engine/index.js";
import type { ComplexVolume } from "../src/recon/reconstruct.js";
import { phantom, phaseShift, proto, simulate, tissue } from "./sequence-helpers.js";

const disc = (df: number) =>
  phantom({
    tissues: { gel: tissue("2000 ms", "2000 ms") },
    shapes: [{ shape: "ellipse", center: ["0.3 cm", "-0.2 cm"], semiAxes: ["2.5 cm", "2.5 cm"], tissue: "gel" }],
    b0: { expression: String(df) },
  });

/** The [phase][read] image transposed to [read][phase], so phaseShift measures along read. */
function transpose(v: ComplexVolume, nPhase: number, nRead: number): { re: Float64Array; im: Float64Array } {
  const re = new Float64Array(nPhase * nRead), im = new Float64Array(nPhase * nRead);
  for (let y = 0; y < nPhase; y++) for (let x = 0; x < nRead; x++) {
    re[x * nPhase + y] = v.re[y * nRead + x]!;
    im[x * nPhase + y] = v.im[y * nRead + x]!;
  }
  return { re, im };
}

const ppmOf = (df: number, fieldT: number) => (df / (GAMMA_BAR * fieldT)) * 1e6;

describe("readout shift carries the sign of the read gradient: Δx = sign(G_read)·Δf/BW_px pixels", () => {
  // Closed form: a spin at u with offset Δf is read at γ̄G·u + Δf, so it appears at u + Δf/(γ̄G);
  // |γ̄G|·Δx = BW_px (Bernstein, King & Zhou 2004, ch. 11); the sign follows G.
  for (const polarity of ["positive", "negative"]) {
    for (const phaseDirection of ["y", "x"]) {
      const readAxis = phaseDirection === "y" ? "x" : "y";
      it(`readout polarity ${polarity}, readout along ${readAxis}: measured = predicted within 0.1 px`, () => {
        const df = -250, bw = 125; // −2 px at a positive read gradient
        const p = proto({ readoutPolarity: polarity, phaseDirection, bandwidth: `${bw} Hz/px` });
        const a = simulate(p, disc(0)), b = simulate(p, disc(df));
        const n = p.matrix.phase, m = p.matrix.read;
        const measured = phaseShift(transpose(a.image, n, m), transpose(b.image, n, m), m, n);
        const pred = predictProtocolFatShift(p, b.seq, ppmOf(df, p.field));
        const sign = polarity === "positive" ? 1 : -1;
        expect(pred.readout.px).toBeCloseTo((sign * df) / bw, 9);
        expect(pred.readout.direction).toBe(`${sign * df > 0 ? "+" : "-"}${readAxis}`);
        expect(Math.abs(measured - pred.readout.px), `measured ${measured} px, predicted ${pred.readout.px} px`).toBeLessThan(0.1);
      });
    }
  }
});

describe("EPI phase-direction shift uses the effective echo spacing ESP/shots", () => {
  // Closed form: Δy = Δf·N_lines·ESP/shots pixels (Jezzard & Balaban 1995, MRM 34:65; echo-time shifting of
  // interleaved shots, Feinberg & Oshio 1994, MRM 32:535); the prediction reads the sequence's effectiveEchoSpacing.
  for (const shots of [1, 2, 4]) {
    it(`${shots} shot(s): report prediction = ESP/shots form = measured shift within 0.2 px`, () => {
      const df = 150;
      const p = proto({ sequence: "epi", tr: "500 ms", te: "30 ms", bandwidth: "2000 Hz/px", shots, dummyScans: shots > 1 ? 1 : 0 });
      const a = simulate(p, disc(0)), b = simulate(p, disc(df));
      const esp = b.seq.derived["echoSpacing"]!.value as number;
      expect(b.seq.derived["effectiveEchoSpacing"]!.value).toBeCloseTo(esp / shots, 15);
      const input = fatShiftInput(p, b.seq, ppmOf(df, p.field));
      expect(input.effectiveEchoSpacing).toBeCloseTo(esp / shots, 15);
      const pred = predictFatShift(input);
      const closed = (df * p.matrix.phase * esp) / shots;
      expect(pred.phase.px).toBeCloseTo(closed, 9);
      const measured = phaseShift(a.image, b.image, p.matrix.phase, p.matrix.read);
      expect(Math.abs(closed)).toBeGreaterThan(0.5);
      expect(Math.abs(measured - pred.phase.px), `measured ${measured} px, predicted ${pred.phase.px} px`).toBeLessThan(0.2);
    });
  }
  it("EPI alternates the read gradient: lines shift by ±Δf/BW_px along read and the image has no net read shift", () => {
    // Closed form: a line read with +G shows the spin at u + Δf/(γ̄G), one read with −G at u − Δf/(γ̄G); each half of
    // the lines makes the image moved one way, so the image is the mean of the two copies (no net shift along read)
    // and their difference is aliased to half the FOV along phase (the N/2 ghost; Bernstein, King & Zhou 2004, ch. 16).
    // The same shift read with one gradient sign (spin-warp GRE) moves the image by Δf/BW_px: the measurement sees it.
    const df = 125, bw = 400; // ±0.31 px per line; along phase Δf·N·ESP ≈ 12 px (no wrap of the disc)
    const readCentroid = (v: ComplexVolume, nPhase: number, nRead: number) => {
      let s = 0, sx = 0;
      for (let y = 0; y < nPhase; y++) for (let x = 0; x < nRead; x++) {
        const i = y * nRead + x, m = Math.hypot(v.re[i]!, v.im[i]!);
        s += m;
        sx += m * x;
      }
      return sx / s;
    };
    // the odd part in Δf, (c(+Δf) − c(−Δf))/2, is the shift: a net read shift flips with Δf; what does not (about
    // 0.04 px here, from the lines' ghost at half the FOV) is left out
    const oddShift = (p: ReturnType<typeof proto>) => {
      const nP = p.matrix.phase, nR = p.matrix.read;
      return (readCentroid(simulate(p, disc(df)).image, nP, nR) - readCentroid(simulate(p, disc(-df)).image, nP, nR)) / 2;
    };
    const epi = proto({ sequence: "epi", tr: "500 ms", te: "60 ms", bandwidth: `${bw} Hz/px` });
    const pred = predictProtocolFatShift(epi, buildSequence(epi), ppmOf(df, epi.field));
    expect(pred.readout.px).toBe(0);
    expect(pred.readout.direction).toBe("none");
    expect(pred.readout.perLinePx).toBeCloseTo(df / bw, 12);
    const greShift = oddShift(proto({ tr: "500 ms", te: "10 ms", bandwidth: `${bw} Hz/px` }));
    expect(Math.abs(greShift - df / bw), `GRE: centroid moved ${greShift} px, Δf/BW = ${df / bw} px`).toBeLessThan(0.05);
    const epiShift = oddShift(epi);
    expect(Math.abs(epiShift), `EPI: centroid moved ${epiShift} px (per line ±${df / bw} px)`).toBeLessThan(0.03);
  });
  it("no phase-direction prediction for spin-warp echo trains (RARE has an echo spacing but one line per echo)", () => {
    // Each RARE echo is refocused: off-resonance phase does not build up along the phase-encoding order
    const p = proto({ sequence: "rare", tr: "2000 ms", te: "40 ms", echoTrainLength: 4, refocusing: { shape: "hard", duration: "0.2 ms", steps: 20 } });
    const pred = predictProtocolFatShift(p, buildSequence(p));
    expect(pred.phase.px).toBe(0);
    expect(pred.readout.px).toBeLessThan(0);
  });
});

describe("slice shift of an off-resonant spin: the excited slab, and for a spin echo also the refocused slab", () => {
  // Closed form: a slice-selective pulse of gradient G acts on spins where γ̄·G·w + Δf lies in its band, so its
  // profile moves by Δz = −Δf/(γ̄·G) (Bernstein, King & Zhou 2004, ch. 5 and 11). A spin echo's refocusing pulse has
  // a gradient of its own (here 2/3 of the excitation's: a 3 ms pulse against a 2 ms one of the same time–bandwidth),
  // so its slab moves by another amount, and the echo comes from where both act. Measured: the centroid along the
  // slice normal of the echo amplitude of single through-slice isochromats (a probe column at the in-plane centre),
  // at Δf against Δf = 0.
  const df = -220; // about fat at 1.5 T
  const profileCentroid = (p: ReturnType<typeof proto>, offsetHz: number) => {
    const seq = buildSequence(p);
    const iso = probeColumn([{ pd: 1, t1: 0.1, t2: 1 }], logicalAxes(p), p.slice.thickness, 0, 61, 3, offsetHz);
    let s = 0, sw = 0;
    for (let i = 0; i < iso.count; i++) {
      const m0 = new Float64Array(iso.count);
      m0[i] = iso.m0[i]!;
      const k = simulateSerial(seq, { ...iso, m0 }, { receiverFilter: false, readout: "direct" }).kspace;
      let a = 0;
      for (let j = 0; j < k.re.length; j++) a += Math.hypot(k.re[j]!, k.im[j]!);
      s += a;
      sw += a * iso.wGrid[iso.iw[i]!]!;
    }
    return sw / s;
  };
  const common = { matrix: { read: 8, phase: 8 }, tr: "1000 ms", excitation: { shape: "sinc", duration: "2 ms", tbw: 4, steps: 100 }, refocusing: { shape: "sinc", duration: "3 ms", tbw: 4, steps: 100 } };
  it("gradient echo: the profile moves by −Δf/(γ̄·G_excitation)", () => {
    const p = proto({ ...common, te: "10 ms", flip: "30 deg" });
    const pred = predictProtocolFatShift(p, buildSequence(p), ppmOf(df, p.field));
    expect(pred.slice.refocusedM).toBeUndefined();
    const moved = profileCentroid(p, df) - profileCentroid(p, 0);
    expect(Math.abs(moved - pred.slice.m), `moved ${moved * 1e3} mm, predicted ${pred.slice.m * 1e3} mm`).toBeLessThan(0.03e-3);
  });
  it("spin echo: the echo's slice lies between the excited and the refocused slab's shifts (each −Δf/(γ̄·G) of its pulse)", () => {
    const p = proto({ ...common, sequence: "se", te: "20 ms" });
    const seq = buildSequence(p);
    const pred = predictProtocolFatShift(p, seq, ppmOf(df, p.field));
    const gExc = seq.pulses[0]!.gradient, gRef = seq.pulses[1]!.gradient;
    expect(pred.slice.m).toBeCloseTo(-df / (GAMMA_BAR * gExc), 12);
    expect(pred.slice.refocusedM!).toBeCloseTo(-df / (GAMMA_BAR * gRef), 12);
    expect(Math.abs(pred.slice.refocusedM! - pred.slice.m)).toBeGreaterThan(0.2e-3);
    const moved = profileCentroid(p, df) - profileCentroid(p, 0);
    const lo = Math.min(pred.slice.m, pred.slice.refocusedM!), hi = Math.max(pred.slice.m, pred.slice.refocusedM!);
    expect(moved, `moved ${moved * 1e3} mm; excited ${pred.slice.m * 1e3} mm, refocused ${pred.slice.refocusedM! * 1e3} mm`).toBeGreaterThan(lo + 0.1 * (hi - lo));
    expect(moved).toBeLessThan(hi - 0.1 * (hi - lo));
  });
});
