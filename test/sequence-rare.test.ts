/**
 * RARE echo amplitudes against the CPMG prediction for ideal 180° pulses
 * (Carr & Purcell 1954; Meiboom & Gill 1958; Hennig et al. 1986): echo n
 * carries M0·e^{−n·ESP/T2}. A point-like object at the isocentre (a 2 mm disc
 * inside one voxel) makes every phase line's k = 0 sample the echo amplitude
 * itself, since phase encoding does not change the phase at r = 0. Hard,
 * very short pulses (10 and 20 µs) are the instantaneous ideal pulses of the
 * closed form: with 0.2 ms pulses the magnetization spends part of each pulse
 * along z, relaxing with T1 instead of T2, and echo 16 comes out 0.8 % high.
 */
import { describe, expect, it } from "vitest";
import { phantom, proto, simulate, tissue } from "./sequence-helpers.js";

const T2 = 0.08;
const dot = phantom({
  tissues: { gel: tissue("500 ms", "80 ms") },
  shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2 mm", "2 mm"], tissue: "gel" }],
});

function echoAmplitudes(over: Record<string, unknown>) {
  const p = proto({ sequence: "rare", tr: "1000 ms", matrix: { read: 32, phase: 16 }, echoTrainLength: 16,
    excitation: { shape: "hard", duration: "0.01 ms", steps: 4 }, refocusing: { shape: "hard", duration: "0.02 ms", steps: 4 }, ...over });
  const r = simulate(p, dot);
  let m0 = 0;
  for (let i = 0; i < r.iso.count; i++) m0 += r.iso.m0[i]!;
  const { read } = r.kacq;
  const amp = new Float64Array(16);
  for (let line = 0; line < 16; line++) {
    const j = line * read + r.seq.centre.read;
    amp[line] = Math.hypot(r.kacq.re[j]!, r.kacq.im[j]!);
  }
  return { r, m0, amp };
}

describe("RARE: echo n = M0·e^{−n·ESP/T2} (CPMG, ideal refocusing)", () => {
  it("linear order: every line's amplitude matches its echo time within 0.3 %; k increases along the train", () => {
    const { r, m0, amp } = echoAmplitudes({ te: "72 ms", echoSpacing: "8 ms" });
    const esp = r.seq.derived["echoSpacing"]!.value as number;
    expect(esp).toBeCloseTo(8e-3, 12);
    for (let line = 0; line < 16; line++) {
      const t = r.seq.echoTimes![line]!;
      const n = Math.round(t / esp);
      expect(t).toBeCloseTo(n * esp, 12);
      expect(Math.abs(amp[line]! / (m0 * Math.exp((-n * esp) / T2)) - 1)).toBeLessThan(3e-3);
    }
    // linear with the centre line (8) read by echo 9 (TE 72 ms): echo n reads line n − 1, one sweep from −k to +k
    for (let line = 1; line < 16; line++) expect(r.seq.echoTimes![line]!).toBeGreaterThan(r.seq.echoTimes![line - 1]!);
  });

  it("effective TE is the echo time of the centre line, and its amplitude is M0·e^{−TEeff/T2}", () => {
    for (const [te, order] of [["24 ms", "centric"], ["8 ms", "centric"], ["48 ms", "linear"]] as const) {
      const { r, m0, amp } = echoAmplitudes({ te, echoSpacing: "8 ms", echoOrder: order });
      const teEff = r.seq.derived["effectiveTe"]!.value as number;
      expect(teEff).toBeCloseTo(parseFloat(te) * 1e-3, 12);
      const c = r.seq.centre.phase;
      expect(r.seq.echoTimes![c]!).toBeCloseTo(teEff, 12);
      expect(Math.abs(amp[c]! / (m0 * Math.exp(-teEff / T2)) - 1)).toBeLessThan(3e-3);
    }
  });

  it("centric order: echo times grow with distance from the centre line", () => {
    const { r } = echoAmplitudes({ te: "8 ms", echoSpacing: "8 ms", echoOrder: "centric" });
    const c = r.seq.centre.phase, t = r.seq.echoTimes!;
    for (let d = 1; d < 8; d++) {
      expect(t[c + d]!).toBeGreaterThan(t[c + d - 1]!);
      expect(t[c - d]!).toBeGreaterThan(t[c - d + 1]!);
    }
  });

  it("te that is not an echo of the train: one-line error naming the echo times that would work", () => {
    expect(() => echoAmplitudes({ te: "30 ms", echoSpacing: "8 ms" })).toThrow(/set te to 24\.00 ms or 32\.00 ms/);
    expect(() => echoAmplitudes({ echoTrainLength: 5, te: "40 ms" })).toThrow(/echoTrainLength that divides 16 \(1, 2, 4, 8, 16\)/);
  });
});
