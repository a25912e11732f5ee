/**
 * `isofold check` (src/check): its numbers against closed forms on cases
 * computed by hand, its PSF closed forms against direct numerical
 * integration, and its wrap prediction against simulated images (landing
 * rows and folded extent within 1 px; the smallest FOV without wrap).
 */
import { describe, expect, it } from "vitest";
import { join } from "node:path";
import { GAMMA_BAR } from "../src/constants.js";
import {
  checkProtocol, foldPx, fwhm, fwhmGradientEcho, fwhmSampled, insideAcquired, minFovNoWrap, minOversamplingNoWrap, parseRoi,
  parseThresholds, phaseLinesFor, psfExpWindow, SINC_FWHM, type CheckResult,
} from "../src/check/index.js";
import { foldedSignal } from "../src/check/measure.js";
import { truthMaps } from "../src/analysis/index.js";
import { UserError } from "../src/errors.js";
import { parsePhantom } from "../src/phantom/index.js";
import { logicalAxes, parseProtocolObject } from "../src/protocol/index.js";
import { buildSequence } from "../src/sequence/index.js";
import { simulateSmall } from "../src/cli/validate.js";
import { verifyCheck } from "../src/cli/verify.js";
import { tempDir, writeJson } from "./helpers.js";

type Obj = Record<string, unknown>;
const gel = { pd: 1, t1: "300 ms", t2: "80 ms", t2star: "80 ms", species: "water" };

function proto(over: Obj = {}): Obj {
  return {
    sequence: "gre", field: "1.5 T", fov: { read: "8 cm", phase: "8 cm" }, matrix: { read: 32, phase: 32 },
    slice: { thickness: "5 mm" }, bandwidth: "500 Hz/px", te: "3 ms", tr: "50 ms", flip: "30 deg", phaseDirection: "y",
    excitation: { shape: "hard", duration: "0.1 ms", steps: 10 }, oversampling: { read: 2, phase: 0 },
    ...over,
  };
}
function bar(y0cm: number, y1cm: number, b0?: string): Obj {
  return {
    name: "bar", tissues: { gel },
    shapes: [{ shape: "rectangle", label: "bar", center: ["0 cm", `${(y0cm + y1cm) / 2} cm`], size: ["2 cm", `${y1cm - y0cm} cm`], tissue: "gel" }],
    ...(b0 ? { b0: { expression: b0 } } : {}),
  };
}
function run(ph: Obj, p: Obj, opts: Parameters<typeof checkProtocol>[3] = {}): CheckResult {
  const protocol = parseProtocolObject(p as never, "p.json");
  return checkProtocol(parsePhantom(ph, "ph.json", protocol.field), protocol, buildSequence(protocol), opts);
}
const itemOf = (r: CheckResult, key: string) => r.items.find((i) => i.key === key)!;

describe("PSF closed forms", () => {
  it("uniform window: sinc FWHM 1.2067 px (2 × 0.60335, root of sin(πx)/(πx) = ½; from memory)", () => {
    expect(fwhmGradientEcho(0.004, 1e9)).toBeCloseTo(1.2067, 3);
    expect(Math.abs(fwhmSampled(new Float64Array(256).fill(1), 128) - SINC_FWHM)).toBeLessThan(0.005);
  });

  it("strong decay: |one-sided Lorentzian| FWHM √3·T_acq/(π·T2*) px", () => {
    // |1/(β + i2πx)| falls to half at x = √3β/(2π), β = T_acq/T2* = 50 (Haacke et al. 1999, ch. 13)
    const want = (Math.sqrt(3) * 50) / Math.PI;
    expect(Math.abs(fwhmGradientEcho(0.01, 0.0002) / want - 1)).toBeLessThan(0.01);
  });

  it("piecewise-exponential closed form equals a direct midpoint integral of w(u)·e^{i2πux}", () => {
    const pieces = [{ u0: -0.5, u1: 0, a: 1.3, b: 0 }, { u0: 0, u1: 0.5, a: -2.1, b: 0 }];
    for (const x of [0, 0.3, 1.7, 4.2]) {
      const n = 20000;
      let re = 0, im = 0;
      for (let k = 0; k < n; k++) {
        const u = -0.5 + (k + 0.5) / n;
        const w = Math.exp(u < 0 ? 1.3 * u : -2.1 * u);
        re += (w * Math.cos(2 * Math.PI * u * x)) / n;
        im += (w * Math.sin(2 * Math.PI * u * x)) / n;
      }
      expect(psfExpWindow(pieces, x)).toBeCloseTo(Math.hypot(re, im), 6);
    }
  });

  it("zero-filled 5/8 partial Fourier: the sampled PSF matches the continuous window on [−1/8, 1/2]", () => {
    const L = 256, w = new Float64Array(L);
    for (let n = 96; n < L; n++) w[n] = 1;
    const cont = fwhm((x) => psfExpWindow([{ u0: -32 / 256, u1: 0.5, a: 0, b: 0 }], x));
    expect(Math.abs(fwhmSampled(w, 128) / cont - 1)).toBeLessThan(0.01);
    expect(cont).toBeGreaterThan(1.5); // the loss is real
  });
});

describe("wrap geometry (Nyquist folding, by hand)", () => {
  it("folds, acquired range, minimum FOV and oversampling", () => {
    expect(foldPx(17.5, 32)).toBeCloseTo(-14.5, 12);
    expect(foldPx(-20, 32)).toBeCloseTo(12, 12);
    expect(insideAcquired(15.49, 32)).toBe(true);
    expect(insideAcquired(15.5, 32)).toBe(false);
    expect(insideAcquired(-16.5, 32)).toBe(true);
    // signal from −5 cm to +10 cm, 64 × 64 without oversampling: max(0.1·64/31.5, 0.05·64/32.5)
    expect(minFovNoWrap(-0.05, 0.1, 64, 64)).toBeCloseTo(0.1 * 64 / 31.5, 12);
    // +10 cm at FOV 16 cm, 64 px: 40 px; the fold stays out when L > 40 + 32 + ½ → 73 → 74 (even excess) → 10/64
    expect(minOversamplingNoWrap(0, 0.1, 64, 0.16)).toBeCloseTo(10 / 64, 12);
    expect(phaseLinesFor(64, 10 / 64)).toBe(74);
  });
});

describe("check values on hand-computable cases", () => {
  it("fat shift along read at 3 T and 200 Hz/px: 3.4 ppm · γ̄ · 3 T / 200 = 2.17 px toward −x", () => {
    const ph = { name: "o", tissues: { oil: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "40 ms", species: "fat" } }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2 cm", "2 cm"], tissue: "oil" }] };
    const r = run(ph, proto({ field: "3 T", bandwidth: "200 Hz/px" }));
    const it = itemOf(r, "fatShiftRead");
    const hand = (3.4e-6 * 42.577478518e6 * 3) / 200; // 2.1715 px (γ̄ CODATA 2018)
    expect(it.value).toBeCloseTo(hand, 6);
    expect((it.detail as { direction: string }).direction).toBe("-x");
    expect((it.detail as { mm: number }).mm).toBeCloseTo(-hand * 2.5, 6);
    expect(it.verdict).toBe("problem"); // > 2 px
    expect(it.threshold.text).toBe("watch > 1 px, problem > 2 px");
    // a changed threshold changes the verdict
    const r2 = run(ph, proto({ field: "3 T", bandwidth: "200 Hz/px" }), { thresholds: parseThresholds(["fatShiftRead=2.5 px,4 px"]) });
    expect(itemOf(r2, "fatShiftRead").verdict).toBe("fine");
  });

  it("B0 distortion along read: 2000 Hz/m · 2 cm = 40 Hz at the disc edge → 40/500 px; EPI along phase 40·N·ESP", () => {
    const ph = { name: "d", tissues: { gel }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2 cm", "2 cm"], tissue: "gel" }], b0: { expression: "2000 * x" } };
    const r = run(ph, proto());
    expect(itemOf(r, "distortionRead").value!).toBeCloseTo(40 / 500, 3);
    const epi = proto({ sequence: "epi", bandwidth: "2000 Hz/px", te: "30 ms", tr: "500 ms", flip: "90 deg" });
    const re = run(ph, epi);
    const seq = buildSequence(parseProtocolObject(epi as never, "p.json"));
    const esp = seq.derived["echoSpacing"]!.value as number;
    // Jezzard & Balaban 1995: Δy = Δf·N·ESP (one shot)
    expect(itemOf(re, "distortionPhase").value!).toBeCloseTo(40 * 32 * esp, 3);
    expect(itemOf(re, "fatShiftPhase").value!).toBeCloseTo(3.4e-6 * GAMMA_BAR * 1.5 * 32 * esp, 6);
  });

  it("blur along read: the tissue's T2* over 1/BW; partial Fourier: zero-fill widens, homodyne is stated at full width", () => {
    const ph = { name: "b", tissues: { t: { pd: 1, t1: "300 ms", t2: "100 ms", t2star: "3 ms", species: "water" } }, shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["2 cm", "2 cm"], tissue: "t" }] };
    const r = run(ph, proto({ bandwidth: "100 Hz/px", te: "8 ms" }));
    expect(itemOf(r, "blurRead").value!).toBeCloseTo(fwhmGradientEcho(0.01, 0.003), 9);
    expect(itemOf(r, "blurRead").value!).toBeGreaterThan(1.5);
    const zf = run(ph, proto({ partialFourier: { phase: 0.625, method: "zero-fill" } }));
    expect(itemOf(zf, "blurPartialFourier").value!).toBeGreaterThan(1.4);
    const hd = run(ph, proto({ partialFourier: { phase: 0.625, method: "homodyne" } }));
    expect(itemOf(hd, "blurPartialFourier").value!).toBeCloseTo(SINC_FWHM, 6);
  });

  it("cost: SNR against itself is 1; headroom = 1 − peak/limit of the worst axis", () => {
    const ph = bar(-1, 1);
    const p = parseProtocolObject(proto() as never, "p.json");
    const seq = buildSequence(p);
    const r = checkProtocol(parsePhantom(ph, "ph.json", 1.5), p, seq, { reference: { name: "itself", seq } });
    expect(itemOf(r, "snr").value).toBeCloseTo(1, 12);
    const peak = Math.max(...["Read", "Phase", "Slice"].map((a) => seq.derived[`peakGradient${a}`]!.value as number));
    expect(itemOf(r, "gradientHeadroom").value!).toBeCloseTo((1 - peak / p.hardware.gmax) * 100, 9);
    expect(itemOf(r, "gradientHeadroom").reason).toMatch(/not a nerve-stimulation, SAR or acoustic check/);
  });

  it("read wrap only without the receiver filter: a bar at x 13.9…15.1 cm, FOV 8 cm × 2 oversampling lands on columns 8…12", () => {
    // acquired read grid 64 × 2.5 mm (edge at 31.5 px = 7.875 cm); 55.6…60.4 px − 64 = −8.4…−3.6 px → column centres 16 − 8 … 16 − 4
    const ph = { name: "r", tissues: { gel }, shapes: [{ shape: "rectangle", label: "side bar", center: ["14.5 cm", "0 cm"], size: ["1.2 cm", "2 cm"], tissue: "gel" }, { shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["1 cm", "1 cm"], tissue: "gel" }] };
    const off = run(ph, proto({ receiverFilter: false }));
    const f = off.wrap.read.folded.find((x) => x.landsPx)!;
    expect(f.shape).toBe("side bar");
    expect(f.from).toBe("+x");
    expect(f.landsPx).toEqual([8, 12]);
    expect(itemOf(off, "wrapRead").value).toBe(5);
    expect(itemOf(run(ph, proto()), "wrapRead").value).toBe(0); // the filter removes it
  });

  it("3D: a phantom shorter than the slab does not fold along slice encoding; one longer does", () => {
    const p3 = proto({ sequence: "gre3d", matrix: { read: 16, phase: 16, slice: 8 }, slice: { thickness: "4 mm" }, excitation: { shape: "sinc", duration: "1 ms", steps: 40 } });
    const cyl = (len: string) => ({ name: "c", tissues: { gel }, shapes: [{ shape: "cylinder", center: ["0 cm", "0 cm", "0 cm"], radius: "2 cm", length: len, axis: "z", tissue: "gel" }] });
    expect(itemOf(run(cyl("2 cm"), p3), "wrapSlice").value).toBe(0);
    const long = itemOf(run(cyl("10 cm"), p3), "wrapSlice");
    expect(long.value!).toBeGreaterThan(1);
    expect(long.verdict).not.toBe("fine");
  });
});

describe("wrap prediction against simulated images", () => {
  const p = proto();
  const protocol = parseProtocolObject(p as never, "p.json");
  const measure = (ph: Obj, pr = protocol) => {
    const phantom = parsePhantom(ph, "ph.json", pr.field);
    const s = simulateSmall(pr, phantom, { density: 2, sliceCount: 1, t2primeIsochromats: 1 });
    const nR = pr.matrix.read, nP = pr.matrix.phase;
    const truth = truthMaps(phantom, { axes: logicalAxes(pr), nRead: nR, nPhase: nP, dx: pr.fov.read / nR, dy: pr.fov.phase / nP, thickness: pr.slice.thickness, position: 0, offsetHz: 0 });
    return foldedSignal(s.mag, truth.pd, nR, nP, () => false);
  };

  for (const [name, y0, y1, rows] of [["crossing the FOV edge", 2.0, 5.4, [0, 5]], ["wholly outside the FOV", 4.6, 5.6, [3, 6]]] as const) {
    it(`a bar ${name}: landing rows and folded extent within 1 px`, () => {
      const r = run(bar(y0, y1), p);
      const f = r.wrap.phase.folded.find((x) => x.landsPx)!;
      // by hand: the acquired edge is at 15.5 px = 3.875 cm; y − 8 cm lands at rows (y − 8 cm)/2.5 mm + 16
      expect(f.landsPx).toEqual(rows);
      const m = measure(bar(y0, y1));
      expect(Math.abs(m.firstRow! - f.landsPx![0])).toBeLessThanOrEqual(1);
      expect(Math.abs(m.lastRow! - f.landsPx![1])).toBeLessThanOrEqual(1);
      expect(Math.abs(m.rows - r.wrap.phase.rows)).toBeLessThanOrEqual(1);
      expect(itemOf(r, "wrapPhase").verdict).not.toBe("fine");
    });
  }

  it("the smallest phase FOV it states has no folded signal; 1 cm below it there is", () => {
    const r = run(bar(2.0, 5.4), p);
    const minFov = r.wrap.phase.minFov!;
    // by hand: 5.4 cm · 32/(32 − 16 − ½) = 11.148 cm, rounded up to 0.1 mm
    expect(minFov).toBeCloseTo(0.1115, 6);
    const at = { ...p, fov: { read: "8 cm", phase: `${minFov * 100} cm` } };
    const below = { ...p, fov: { read: "8 cm", phase: `${minFov * 100 - 1} cm` } };
    expect(run(bar(2.0, 5.4), at).wrap.phase.rows).toBe(0);
    expect(run(bar(2.0, 5.4), below).wrap.phase.rows).toBeGreaterThan(0);
    expect(measure(bar(2.0, 5.4), parseProtocolObject(at as never, "p.json")).rows).toBe(0);
    expect(measure(bar(2.0, 5.4), parseProtocolObject(below as never, "p.json")).rows).toBeGreaterThan(0);
    // and the oversampling it states keeps the 8 cm FOV free of folds
    const os = r.wrap.phase.minOversampling!;
    expect(run(bar(2.0, 5.4), { ...p, oversampling: { read: 2, phase: os } }).wrap.phase.rows).toBe(0);
  });

  it("an ROI on the landing band is hit; one elsewhere is not; an ROI outside the FOV is a user error", () => {
    const on = parseRoi('{"shape":"rectangle","center":["0 cm","-3.5 cm"],"size":["2 cm","1 cm"]}');
    const off = parseRoi('{"shape":"rectangle","center":["0 cm","0 cm"],"size":["2 cm","1 cm"]}');
    expect(itemOf(run(bar(2.0, 5.4), p, { roi: on }), "wrapPhaseRoi").verdict).toBe("problem");
    expect(itemOf(run(bar(2.0, 5.4), p, { roi: off }), "wrapPhaseRoi").value).toBe(0);
    const far = parseRoi('{"shape":"ellipse","center":["20 cm","0 cm"],"semiAxes":["1 cm","1 cm"]}');
    expect(() => run(bar(2.0, 5.4), p, { roi: far })).toThrow(UserError);
  });

  it("--verify (in-process): predicted and measured folded rows agree within 1 px", async () => {
    const dir = tempDir();
    const ph = writeJson(dir, "ph.json", bar(2.0, 5.4));
    const pf = writeJson(dir, "p.json", p);
    const opts = { protocol: pf, set: [], threshold: [] };
    const r = run(bar(2.0, 5.4), p);
    const v = await verifyCheck(ph, opts, r, { workers: 1, iso: { t2primeIsochromats: 1 } });
    const rowOf = (q: string) => v.rows.find((x) => x.quantity === q)!.values!;
    for (const q of ["folded rows along phase", "folded band: first row", "folded band: last row"]) {
      expect(Math.abs(rowOf(q).predicted! - rowOf(q).measured!), q).toBeLessThanOrEqual(1);
    }
    expect(join(dir)).toBeTruthy();
  });
});

describe("validate can fail", () => {
  it("a simulator that returns a wrong image fails every simulated case; the closed-form-only cases still pass", async () => {
    const { runValidation, CASES } = await import("../src/check/validate.js");
    // the right pipeline with k-space and image scaled by 1.1 (10 % too much signal, nothing moved)
    const rows = runValidation((p, ph, iso) => {
      const s = simulateSmall(p, ph, iso);
      for (const a of [s.kacq.re, s.kacq.im, s.image.re, s.image.im, s.mag]) for (let i = 0; i < a.length; i++) a[i] = a[i]! * 1.1;
      return s;
    });
    expect(rows).toHaveLength(CASES.length);
    const byName = (n: string) => rows.find((r) => r.check.includes(n))!;
    expect(byName("Ernst equation (α = 30°)").pass).toBe(false);
    expect(byName("spin echo amplitude (TE 20").pass).toBe(false);
    expect(byName("jinc").pass).toBe(false);
    expect(byName("hard pulse").pass).toBe(true);
  });
});
