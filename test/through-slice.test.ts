/**
 * Automatic through-slice sampling against a converged reference.
 *
 * Closed form behind the rule: a coherence pathway with a through-slice
 * moment of K cycles per thickness contributes ∫ a(w)·exp(i2πK·w/Δz) dw;
 * a uniform grid of ρ points per thickness evaluates instead the sum of that
 * integral at K − m·ρ over all m (Poisson summation; aliasing of a sampled
 * Fourier integral), so a copy landing near K − m·ρ ≈ 0 survives. The
 * pathway moments are those of the extended phase graph (Hennig 1988;
 * Weigel 2015). Reference: the same simulation with 1200 through-slice
 * isochromats (400 per thickness), where every copy lies far outside the
 * slice profiles' spectra. Tiny grids (a uniform disc on 4×4 / 8×8) so each
 * case runs in well under a second.
 */
import { describe, expect, it } from "vitest";
import { buildSequence, pathwayMoments } from "../src/sequence/index.js";
import { logicalAxes } from "../src/protocol/geometry.js";
import { checkSliceConvergence, SLICE_CONVERGENCE_TOLERANCE } from "../src/engine/index.js";
import { isoOptionsFor } from "../src/cli/pipeline.js";
import { defaultIsochromatOptions } from "../src/isochromats/index.js";
import type { Protocol } from "../src/protocol/index.js";
import { phantom, proto, simulate, tissue } from "./sequence-helpers.js";

const disc = phantom({
  tissues: { gel: tissue("800 ms", "80 ms") },
  shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["6 cm", "6 cm"], tissue: "gel" }],
});

/** Relative L2 difference of two k-spaces. */
function rel(a: ReturnType<typeof simulate>, b: ReturnType<typeof simulate>): number {
  let n = 0, d = 0;
  for (let i = 0; i < a.kgrid.re.length; i++) {
    n += (a.kgrid.re[i]! - b.kgrid.re[i]!) ** 2 + (a.kgrid.im[i]! - b.kgrid.im[i]!) ** 2;
    d += b.kgrid.re[i]! ** 2 + b.kgrid.im[i]! ** 2;
  }
  return Math.sqrt(n / d);
}

const sinc = (tbw: number, perCycle = 0.75) => ({ shape: "sinc", duration: `${perCycle * tbw} ms`, tbw, steps: 100 });
const EXTENT = 3;
const iso = (n: number) => ({ sliceCount: n, sliceExtent: EXTENT, t2primeIsochromats: 1 });
const chosen = (p: Protocol) => isoOptionsFor(p, { ...defaultIsochromatOptions(), sliceCount: 12, sliceExtent: EXTENT }).sliceCount;
const check = (p: Protocol, n: number) => checkSliceConvergence(buildSequence(p), [{ pd: 1, t1: 0.8, t2: 0.08 }],
  { axes: logicalAxes(p), thickness: p.slice.thickness, position: 0, offsetHz: 0 }, n, EXTENT);

const se = (tbw: number, c: number, matrix = 4) => proto({
  sequence: "se", te: "40 ms", tr: "300 ms", crusherCycles: c, refocusing: sinc(tbw), excitation: sinc(4, 0.5),
  matrix: { read: matrix, phase: matrix }, oversampling: { read: 1, phase: 0 },
});
const rare = (tbw: number, c: number) => proto({
  sequence: "rare", te: "40 ms", tr: "400 ms", echoTrainLength: 4, crusherCycles: c, refocusing: sinc(tbw), excitation: sinc(4, 0.5),
  matrix: { read: 8, phase: 8 }, oversampling: { read: 1, phase: 0 },
});
const bssfp = (tbw: number) => proto({
  sequence: "bssfp", te: "4 ms", tr: "8 ms", flip: "40 deg", excitation: sinc(tbw, 0.19),
  matrix: { read: 8, phase: 8 }, oversampling: { read: 1, phase: 0 },
});

describe("pathway moments (extended phase graph) of a spin echo", () => {
  it("the unrefocused FID carries 2c + tbw cycles per thickness: c-cycle crushers on both sides plus the refocusing lobe", () => {
    // closed form: crusher c each side + half the refocusing lobe (tbw/2 cycles) each side → 2c + tbw
    for (const [tbw, c] of [[2, 1], [4, 2], [8, 4]] as const) {
      const p = se(tbw, c);
      const m = pathwayMoments(buildSequence(p), p.slice.thickness, 1).maxMoment;
      expect(Math.abs(m - (2 * c + tbw))).toBeLessThan(0.1); // +0.07: the excitation's rephaser rounding to the gradient raster
    }
  });
});

describe("automatic through-slice count converges (reference: 1200 through-slice isochromats)", () => {
  const cases: [string, () => Protocol, number][] = [
    ["SE tbw 2, crushers 1", () => se(2, 1), 0.01],
    ["SE tbw 4, crushers 2", () => se(4, 2), 0.01],
    ["SE tbw 8, crushers 4 (the audit's case)", () => se(8, 4), 0.01],
    ["SE tbw 8, crushers 1", () => se(8, 1), 0.01],
    ["SE tbw 2, crushers 4", () => se(2, 4), 0.01],
    ["RARE (4 echoes) tbw 4, crushers 4", () => rare(4, 4), 0.01],
    ["RARE (4 echoes) tbw 8, crushers 2", () => rare(8, 2), 0.01],
    ["RARE (4 echoes) tbw 2, crushers 1", () => rare(2, 1), 0.01],
    ["bSSFP tbw 2", () => bssfp(2), 0.01],
    ["bSSFP tbw 8", () => bssfp(8), 0.01],
  ];
  for (const [name, make, tol] of cases) {
    it(`${name}: within ${tol * 100} % of the reference, and the half-step check agrees`, () => {
      const p = make();
      const n = chosen(p);
      const a = simulate(p, disc, iso(n), true), ref = simulate(p, disc, iso(1200), true);
      const err = rel(a, ref);
      expect(err, `n = ${n}: relative k-space error ${err}`).toBeLessThan(tol);
      expect(check(p, n).converged).toBe(true);
    });
  }

  it("the former rule (4c + 1 per thickness) is off by > 5 % for tbw 8 and the half-step check flags it", () => {
    // audit case: refocusing tbw 8 over 6 ms, 4-cycle crushers → 17 per thickness; the FID at 2c + tbw = 16 cycles aliases to −1
    const p = se(8, 4);
    const old = EXTENT * 17;
    const err = rel(simulate(p, disc, iso(old), true), simulate(p, disc, iso(1200), true));
    expect(err).toBeGreaterThan(0.05);
    const c = check(p, old);
    expect(c.converged).toBe(false);
    expect(c.relativeChange).toBeGreaterThan(10 * SLICE_CONVERGENCE_TOLERANCE);
  });
});
