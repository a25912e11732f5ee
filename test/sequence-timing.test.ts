/**
 * Every builder, checked by walking its blocks (a slow, direct computation):
 * k = 0 on all three axes at the echo sample of the centre line, at time TE
 * after the excitation centre; the balanced SSFP TR has zero net gradient
 * moment on every axis; the EPI echo spacing equals the spacing of the ADC
 * windows and 2·ramp + (N+1)·dwell; derived quantities follow the k-space
 * relations (Bernstein, King & Zhou 2004, Handbook of MRI Pulse Sequences,
 * ch. 11 and §16.1), checked on numbers of our own.
 */
import { predictProtocolFatShift } from "../src/analysis/index.js";
import { describe, expect, it } from "vitest";
import { buildSequence, minTrapezoid, type Sequence } from "../src/sequence/index.js";
import { GAMMA_BAR } from "../src/constants.js";
import { proto } from "./sequence-helpers.js";

interface EchoSample {
  row: number;
  time: number;
  k: [number, number, number];
}

/**
 * Walks the blocks from the first excitation of each TR; refocusing pulses (flip > 120°) negate the
 * accumulated areas at their centre. Returns, for every ADC, the time and area at its echo sample.
 */
function walk(seq: Sequence): EchoSample[] {
  const out: EchoSample[] = [];
  let t = 0, tExc = NaN;
  let a: [number, number, number] = [0, 0, 0];
  for (const b of seq.blocks) {
    if (b.kind === "free") {
      t += b.duration;
      a = [a[0] + b.area[0], a[1] + b.area[1], a[2] + b.area[2]];
    } else if (b.kind === "rf") {
      const p = seq.pulses[b.pulse]!;
      const refocus = p.flip > (2 * Math.PI) / 3;
      const excite = !refocus && p.name === "excitation";
      const before = p.gradient * p.centre, after = p.gradient * (p.duration - p.centre);
      if (excite) {
        a = [0, 0, after];
        tExc = t + p.centre;
      } else if (refocus) {
        a = [-a[0], -a[1], -(a[2] + before) + after];
      } else {
        a = [a[0], a[1], a[2] + before + after];
      }
      t += p.duration;
    } else if (b.kind === "adc") {
      // grid column ⌊N/2⌋ holds k = 0: forward rows put sample j at offset + j, reversed rows at offset + n − 1 − j
      const cR = Math.floor(seq.grid.read / 2);
      const j = seq.grid.reversed && seq.grid.reversed[b.row] ? seq.grid.offset + b.samples - 1 - cR : cR - seq.grid.offset;
      out.push({ row: b.row, time: t + j * b.dwell - tExc, k: [a[0] + b.grad[0] * j * b.dwell, a[1] + b.grad[1] * j * b.dwell, a[2] + b.grad[2] * j * b.dwell] });
      t += b.samples * b.dwell;
      a = [a[0] + b.grad[0] * b.samples * b.dwell, a[1] + b.grad[1] * b.samples * b.dwell, a[2] + b.grad[2] * b.samples * b.dwell];
    }
  }
  return out;
}

const CASES: [string, Record<string, unknown>][] = [
  ["2D GRE", { sequence: "gre", excitation: { shape: "sinc", duration: "2 ms", tbw: 4 } }],
  ["2D GRE, negative readout, asymmetric echo", { sequence: "gre", readoutPolarity: "negative", partialFourier: { read: 0.7 } }],
  ["2D SE", { sequence: "se", te: "20 ms", excitation: { shape: "sinc", duration: "2 ms", tbw: 4 }, refocusing: { shape: "sinc", duration: "3 ms", tbw: 4 } }],
  ["3D GRE", { sequence: "gre3d", matrix: { slice: 8 }, slice: { thickness: "2 mm" } }],
  ["bSSFP", { sequence: "bssfp", te: "3 ms", tr: "6 ms", bandwidth: "600 Hz/px", excitation: { shape: "sinc", duration: "1 ms", tbw: 2 } }],
  ["RARE linear", { sequence: "rare", te: "40 ms", tr: "1000 ms", echoTrainLength: 8 }],
  ["RARE centric", { sequence: "rare", te: "8 ms", tr: "1000 ms", echoTrainLength: 8, echoOrder: "centric", echoSpacing: "8 ms" }],
  ["gradient-echo EPI", { sequence: "epi", te: "30 ms", tr: "500 ms", bandwidth: "2000 Hz/px" }],
  ["spin-echo EPI, partial Fourier (0.75 of the phase lines)", { sequence: "epi", epiEcho: "spin", te: "60 ms", tr: "500 ms", bandwidth: "2000 Hz/px", partialFourier: { phase: 0.75 } }],
  ["gradient-echo EPI, 4 shots", { sequence: "epi", shots: 4, te: "20 ms", tr: "500 ms", bandwidth: "2000 Hz/px" }],
  ["gradient-echo EPI, 2 shots, negative first line, asymmetric echo", { sequence: "epi", shots: 2, te: "20 ms", tr: "500 ms", bandwidth: "2000 Hz/px", readoutPolarity: "negative", partialFourier: { read: 0.8 } }],
  ["bSSFP, negative readout, 3 dummies", { sequence: "bssfp", te: "3 ms", tr: "6 ms", bandwidth: "600 Hz/px", readoutPolarity: "negative", dummyScans: 3 }],
  ["3D GRE, partial Fourier (0.7 of the phase lines), odd slice-encoding steps", { sequence: "gre3d", matrix: { slice: 7 }, slice: { thickness: "3 mm" }, partialFourier: { phase: 0.7 } }],
];

describe("block walk: k = 0 at the centre line's echo sample, at TE (direct sum over blocks)", () => {
  for (const [name, over] of CASES) {
    it(`${name}`, () => {
      const p = proto(over);
      const seq = buildSequence(p);
      const echoes = walk(seq);
      const lines = seq.kspace.phase;
      const c = seq.centre.phase;
      const centreRows = echoes.filter((e) => e.row % lines === c);
      expect(centreRows.length).toBeGreaterThan(0);
      const dkRead = 1 / (p.fov.read * p.oversampling.read);
      for (const e of centreRows) {
        const step = Math.floor(e.row / lines);
        const nSteps = seq.kspace.slice;
        // read and phase: k = 0 at the echo sample, to 1e-6 of a k step
        expect(Math.abs(GAMMA_BAR * e.k[0]) / dkRead).toBeLessThan(1e-6);
        expect(Math.abs(GAMMA_BAR * e.k[1]) * p.fov.phase).toBeLessThan(1e-6);
        // slice: rephased (2D), or the slice-encoding step's own k for 3D
        const kStep = nSteps > 1 ? (step - Math.floor(nSteps / 2)) / (nSteps * p.slice.thickness) : 0;
        expect(Math.abs(GAMMA_BAR * e.k[2] - kStep) * p.slice.thickness).toBeLessThan(1e-6);
        if (nSteps === 1 || step === Math.floor(nSteps / 2)) expect(e.time).toBeCloseTo(seq.timing.te, 9);
      }
      // every row's k along phase matches its line: k_phase = (line − c)/FOV_acq
      for (const e of echoes) {
        expect(Math.abs(GAMMA_BAR * e.k[0]) / dkRead).toBeLessThan(1e-6);
        const line = e.row % lines;
        const fovAcq = (p.fov.phase * lines) / p.matrix.phase;
        expect(GAMMA_BAR * e.k[1] * fovAcq).toBeCloseTo(line - c, 6);
      }
      if (seq.echoTimes) {
        for (const e of echoes) expect(e.time).toBeCloseTo(seq.echoTimes[e.row % lines]!, 9);
      }
    });
  }
});

describe("balanced SSFP: zero net moment per TR (Scheffler & Lehnhardt 2003: fully refocused gradients)", () => {
  it("sum of read, phase and slice areas between consecutive α centres is 0", () => {
    const seq = buildSequence(proto({ sequence: "bssfp", te: "3 ms", tr: "6 ms", bandwidth: "600 Hz/px", ssfpPreparation: "none", excitation: { shape: "sinc", duration: "1 ms", tbw: 2 } }));
    const exc = seq.pulses[0]!;
    let a = [0, 0, 0], started = false, checked = 0;
    for (const b of seq.blocks) {
      if (b.kind === "rf") {
        if (started) {
          a[2]! += exc.gradient * exc.centre;
          for (let k = 0; k < 3; k++) expect(Math.abs(a[k]!)).toBeLessThan(1e-12);
          checked++;
        }
        started = true;
        a = [0, 0, exc.gradient * (exc.duration - exc.centre)];
      } else if (b.kind === "free") for (let k = 0; k < 3; k++) a[k]! += b.area[k]!;
      else if (b.kind === "adc") for (let k = 0; k < 3; k++) a[k]! += b.grad[k]! * b.samples * b.dwell;
    }
    expect(checked).toBeGreaterThan(30);
  });
});

describe("derived quantities vs the k-space relations (Bernstein, King & Zhou 2004, Handbook of MRI Pulse Sequences, ch. 11)", () => {
  // Numbers of our own: ±20 kHz over 160 read samples, read FOV 200 mm, phase FOV 150 mm.
  // Closed forms: dwell Δt = 1/BW_total; BW_total = 2 × half; BW_px = BW_total/N; FOV = 1/Δk; k_max = 1/(2Δx);
  // G_read = BW_total/(γ̄·FOV_read); ΔA_pe = 1/(γ̄·FOV_phase); γ̄ = 42.577478518 MHz/T (CODATA 2018).
  it("±20 kHz over 160 samples: dwell 25 µs, total 40 kHz, 250 Hz/px; FOV 200 × 150 mm: G_read 4.697 mT/m, ΔA_pe 0.15658 mT·ms/m", () => {
    const gammaBar = 42.577478518e6; // Hz/T, CODATA 2018
    const p = proto({ fov: { read: "200 mm", phase: "150 mm" }, matrix: { read: 160, phase: 120 }, bandwidth: "±20 kHz", oversampling: { read: 1 } });
    const d = buildSequence(p).derived;
    expect(d["dwell"]!.value as number).toBeCloseTo(25e-6, 12); // 1/(2 × 20 kHz)
    expect(d["totalBandwidth"]!.value as number).toBeCloseTo(40000, 6);
    expect(d["halfBandwidth"]!.value as number).toBeCloseTo(20000, 6);
    expect(d["pixelBandwidth"]!.value as number).toBeCloseTo(250, 9); // 40 kHz / 160
    expect((d["readGradient"]!.value as number) / (40000 / (gammaBar * 0.2))).toBeCloseTo(1, 6);
    expect((d["readGradient"]!.value as number) * 1e3).toBeCloseTo(4.697, 3); // the same, worked by hand
    expect((d["phaseStepArea"]!.value as number) / (1 / (gammaBar * 0.15))).toBeCloseTo(1, 6);
    expect((d["phaseStepArea"]!.value as number) * 1e6).toBeCloseTo(0.15658, 5);
    expect(d["deltaKRead"]!.value as number).toBeCloseTo(1 / 0.2, 9); // 5 m⁻¹
    expect(d["kMaxRead"]!.value as number).toBeCloseTo(1 / (2 * 0.00125), 6); // Δx = 1.25 mm → 400 m⁻¹
    expect(d["readoutDuration"]!.value as number).toBeCloseTo(160 * 25e-6, 12); // 4 ms
  });

  it("fat-shift bandwidth: 1.4 px at 1.5 T is 3.4 ppm·γ̄·B0/1.4 Hz/px (Δx_pix = Δf/BW_pix)", () => {
    const p = proto({ bandwidth: "1.4 px" });
    const fatHz = 3.4e-6 * 42.577478e6 * 1.5; // CODATA 2018 γ̄, common practice 3.4 ppm
    expect(p.pixelBandwidth).toBeCloseTo(fatHz / 1.4, 3);
    // the prediction the report and the protocol table print: fat (−3.4 ppm) moves 1.4 px toward −read
    expect(predictProtocolFatShift(p, buildSequence(p)).readout.px).toBeCloseTo(-1.4, 9);
  });

  it("the four bandwidth spellings give the same protocol", () => {
    const a = proto({ bandwidth: "250 Hz/px" }).pixelBandwidth;
    expect(proto({ bandwidth: "8 kHz" }).pixelBandwidth).toBeCloseTo(a, 9); // 32 × 250 Hz
    expect(proto({ bandwidth: "±4 kHz" }).pixelBandwidth).toBeCloseTo(a, 9);
    const fat = 3.4e-6 * 42.577478e6 * 1.5;
    expect(proto({ bandwidth: `${fat / 250} px` }).pixelBandwidth).toBeCloseTo(a, 3);
  });

  it("trapezoids: area exact, amplitude ≤ gmax, slew ≤ limit, duration within two raster steps of the continuous optimum", () => {
    const gmax = 0.04, slew = 150;
    for (const area of [1e-7, 1e-6, 5e-6, 1e-5, 3e-5, -2e-5]) {
      const t = minTrapezoid(area, gmax, slew);
      expect(t.amplitude * (t.ramp + t.flat)).toBeCloseTo(area, 15);
      expect(Math.abs(t.amplitude)).toBeLessThanOrEqual(gmax + 1e-12);
      expect(Math.abs(t.amplitude) / t.ramp).toBeLessThanOrEqual(slew * (1 + 1e-9));
      const a = Math.abs(area);
      // continuous optimum: triangle 2√(A/S) if A ≤ G²/S, else A/G + G/S (Bernstein et al. 2004 ch. 7)
      const best = a <= (gmax * gmax) / slew ? 2 * Math.sqrt(a / slew) : a / gmax + gmax / slew;
      expect(t.duration).toBeGreaterThanOrEqual(best - 1e-12);
      expect(t.duration).toBeLessThanOrEqual(best + 3 * 10e-6);
    }
  });

  it("EPI echo spacing = ADC-window spacing = 2·ramp + (N+1)·dwell; phase bandwidth per pixel = 1/(N·ESP)", () => {
    const p = proto({ sequence: "epi", te: "30 ms", tr: "500 ms", bandwidth: "2000 Hz/px" });
    const seq = buildSequence(p);
    const esp = seq.derived["echoSpacing"]!.value as number;
    const starts: number[] = [];
    let t = 0;
    for (const b of seq.blocks) {
      if (b.kind === "adc") starts.push(t);
      t += b.kind === "free" ? b.duration : b.kind === "adc" ? b.samples * b.dwell : b.kind === "rf" ? seq.pulses[b.pulse]!.duration : 0;
    }
    for (let i = 1; i < 32; i++) expect(starts[i]! - starts[i - 1]!).toBeCloseTo(esp, 12);
    const dwell = seq.derived["dwell"]!.value as number, ramp = seq.derived["readRamp"]!.value as number;
    const g = seq.derived["readGradient"]!.value as number;
    expect(ramp).toBeGreaterThanOrEqual(g / p.hardware.slew - 1e-12);
    expect(esp).toBeCloseTo(2 * ramp + (64 + 1) * dwell, 12);
    expect(seq.derived["phasePixelBandwidth"]!.value as number).toBeCloseTo(1 / (32 * esp), 9);
  });
});
