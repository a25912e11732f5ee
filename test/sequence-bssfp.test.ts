/**
 * Balanced SSFP steady state versus off-resonance, on simulated images, against
 * the closed form of Freeman & Hill 1971 (JMR 4:366) in the elliptical form
 * (Xiang & Hoff 2014, MRM 71:927):
 *   I(θ) = M·(1 − a·e^{iθ})/(1 − b·cosθ), θ = 2πΔf·TR + π (alternating RF),
 *   M = M0(1 − E1)sinα/D, a = E2, b = E2(1 − E1)(1 + cosα)/D,
 *   D = 1 − E1cosα − E2²(E1 − cosα);
 * at TE = TR/2 the magnitude is |I|·e^{−TE/T2}. Dark bands at Δf = (k + ½)/TR.
 */
import { describe, expect, it } from "vitest";
import { phantom, proto, simulate, tissue } from "./sequence-helpers.js";

function closedForm(df: number, tr: number, te: number, t1: number, t2: number, alpha: number): number {
  const e1 = Math.exp(-tr / t1), e2 = Math.exp(-tr / t2);
  const d = 1 - e1 * Math.cos(alpha) - e2 * e2 * (e1 - Math.cos(alpha));
  const m = ((1 - e1) * Math.sin(alpha)) / d, a = e2, b = (e2 * (1 - e1) * (1 + Math.cos(alpha))) / d;
  const th = 2 * Math.PI * df * tr + Math.PI;
  const nr = 1 - a * Math.cos(th), ni = -a * Math.sin(th);
  return (m * Math.hypot(nr, ni)) / (1 - b * Math.cos(th)) * Math.exp(-te / t2);
}

describe("bSSFP steady state vs off-resonance (Freeman & Hill 1971; Scheffler & Lehnhardt 2003)", () => {
  const tr = 5e-3, te = 2.5e-3, t1 = 0.2, t2 = 0.05, alpha = (40 * Math.PI) / 180;
  const p = proto({
    sequence: "bssfp", tr: "5 ms", te: "2.5 ms", flip: "40 deg", bandwidth: "500 Hz/px", dummyScans: 400,
    matrix: { read: 32, phase: 32 }, ssfpPreparation: "half-alpha",
    excitation: { shape: "hard", duration: "0.05 ms", steps: 10 },
  });
  const measure = (df: number): number => {
    const ph = phantom({
      tissues: { gel: tissue("200 ms", "50 ms") },
      shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["6 cm", "6 cm"], tissue: "gel" }],
      b0: { expression: String(df) },
    });
    const { mag } = simulate(p, ph);
    let s = 0, n = 0;
    for (let y = 14; y <= 18; y++) for (let x = 14; x <= 18; x++) { s += mag[y * 32 + x]!; n++; }
    return s / n;
  };
  // 1/(2TR) = 100 Hz is the first dark band; 200 Hz = 1/TR is back on a bright peak.
  const offsets = [0, 25, 60, 85, 100, 115, 200];
  const measured = offsets.map(measure);
  it.each(offsets.map((df, i) => [df, i]))("Δf = %d Hz: image value matches the closed form within 1 % of the on-resonance value", (df, i) => {
    const want = closedForm(df, tr, te, t1, t2, alpha);
    const peak = closedForm(0, tr, te, t1, t2, alpha);
    expect(Math.abs(measured[i]! - want)).toBeLessThan(0.01 * peak);
  });
  it("dark band at Δf = 1/(2TR): signal below 15 % of the peak, minimum of the sweep; peaks repeat at 1/TR", () => {
    const iBand = offsets.indexOf(100);
    expect(measured[iBand]!).toBeLessThan(0.15 * measured[0]!);
    expect(Math.min(...measured)).toBe(measured[iBand]);
    expect(measured[offsets.indexOf(200)]!).toBeCloseTo(measured[0]!, 2);
  });
});
