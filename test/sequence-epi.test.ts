/**
 * EPI off-resonance displacement along phase, measured on simulated images,
 * against Δy_px = Δf·N_lines·ESP/shots = Δf/BW_px,phase (Jezzard & Balaban
 * 1995, MRM 34:65; Bernstein, King & Zhou 2004, Handbook of MRI Pulse Sequences, §16.1). A compact
 * disc with a uniform B0 offset; the displacement is the shift of the
 * image along phase between Δf and Δf = 0, measured by phase correlation
 * (sub-pixel; a magnitude centroid is biased by the ringing tails that wrap
 * round the periodic image), within 0.2 px.
 * Also: odd lines read under the negative gradient reconstruct without an
 * N/2 ghost once reversed, and with a strong one when not (so the check can fail).
 */
import { describe, expect, it } from "vitest";
import { toGrid, reconstructGrid, magnitude } from "../src/recon/reconstruct.js";
import { centroid, phantom, phaseShift, proto, simulate, tissue } from "./sequence-helpers.js";

const disc = (df: number) =>
  phantom({
    tissues: { gel: tissue("2000 ms", "2000 ms") },
    shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2.5 cm", "2.5 cm"], tissue: "gel" }],
    b0: { expression: String(df) },
  });

function shiftPx(over: Record<string, unknown>, df: number) {
  const p = proto({ sequence: "epi", tr: "500 ms", bandwidth: "2000 Hz/px", ...over });
  const a = simulate(p, disc(0)), b = simulate(p, disc(df));
  const n = p.matrix.phase, m = p.matrix.read;
  const esp = b.seq.derived["echoSpacing"]!.value as number;
  const lines = b.seq.kspace.phase;
  const predicted = (df * lines * esp) / p.shots;
  const measured = phaseShift(a.image, b.image, n, m);
  return { predicted, measured, a, b };
}

describe("EPI displacement along phase = Δf·N·ESP/shots pixels (Jezzard & Balaban 1995)", () => {
  it("single-shot gradient echo, Δf = +100 Hz and −70 Hz", () => {
    for (const df of [100, -70]) {
      const r = shiftPx({ te: "30 ms" }, df);
      expect(Math.abs(r.predicted)).toBeGreaterThan(1);
      expect(Math.abs(r.measured - r.predicted)).toBeLessThan(0.2);
    }
  });
  it("single-shot spin echo with partial Fourier, 0.75 of the phase lines (homodyne), Δf = +50 Hz", () => {
    const r = shiftPx({ te: "50 ms", epiEcho: "spin", partialFourier: { phase: 0.75 } }, 50);
    expect(Math.abs(r.measured - r.predicted)).toBeLessThan(0.2);
  });
  it("4 interleaved shots with echo-time shifting: displacement shrinks by 4", () => {
    const r = shiftPx({ te: "20 ms", shots: 4, dummyScans: 1 }, 300);
    expect(Math.abs(r.predicted)).toBeGreaterThan(1);
    expect(Math.abs(r.measured - r.predicted)).toBeLessThan(0.2);
  });
  it("on resonance the disc sits at the centre without an N/2 ghost once the odd lines are reversed", () => {
    const { a } = shiftPx({ te: "30 ms" }, 0);
    const n = 32, m = 32;
    const c = centroid(a.mag, n, m);
    expect(c.phase).toBeCloseTo(16, 3);
    expect(c.read).toBeCloseTo(16, 3);
    let peak = 0;
    for (const v of a.mag) peak = Math.max(peak, v);
    // the ghost would sit N/2 away along phase: rows 0–3 and 28–31 hold only the object's ringing tail
    let ghost = 0;
    for (const y of [0, 1, 30, 31]) for (let x = 0; x < m; x++) ghost = Math.max(ghost, a.mag[y * m + x]!);
    expect(ghost / peak).toBeLessThan(0.03);
    // the same acquisition put on the grid without turning the odd rows round has a strong N/2 ghost
    expect(a.seq.grid.reversed![1]! + a.seq.grid.reversed![2]!).toBe(1);
    const wrong = magnitude(reconstructGrid(toGrid(a.kacq, { ...a.seq.grid, reversed: null }), a.seq.grid, a.seq.image));
    let wrongGhost = 0;
    for (const y of [0, 1, 30, 31]) for (let x = 0; x < m; x++) wrongGhost = Math.max(wrongGhost, wrong[y * m + x]!);
    expect(wrongGhost / peak).toBeGreaterThan(0.1);
  });
});
