/**
 * `isofold check --verify`, row "mean displacement along read (B0)": the
 * least-squares fit of the tissues' truth maps (src/check/measure.ts
 * fitReadDisplacement) on closed-form images, and the row on simulated
 * images of the torso against Δf/BW per pixel (common practice: a spin
 * off resonance by Δf is displaced along read by Δf divided by the
 * bandwidth per pixel; Bernstein, King & Zhou 2004, ch. 11).
 */
import { describe, expect, it } from "vitest";
import { readFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { truthMaps } from "../src/analysis/index.js";
import { displacedParts, fitReadDisplacement, type DisplacedPart } from "../src/check/measure.js";
import { runCheck } from "../src/cli/check.js";
import { loadProtocol } from "../src/cli/inputs.js";
import { verifyCheck } from "../src/cli/verify.js";
import { logicalAxes } from "../src/protocol/index.js";
import { runPipeline, tempDir, writeJson } from "./helpers.js";

/**
 * Partial-volume map of the interval [a, b) (pixel units; pixel n covers [n − ½, n + ½)) on n pixels:
 * the truth the fit is given.
 */
function boxMap(n: number, a: number, b: number): Float64Array {
  const m = new Float64Array(n);
  for (let i = 0; i < n; i++) m[i] = Math.max(0, Math.min(b, i + 0.5) - Math.max(a, i - 0.5));
  return m;
}

/**
 * The image of a box [a, b) of complex amplitude (ar, ai) imaged with n k-space samples, k = (j − c)/n
 * cycles per pixel, c = ⌊n/2⌋: its continuous Fourier transform F(k) = ∫_a^b e^{−i2πk(u − c)} du =
 * (e^{−iωα} − e^{−iωβ})/(iω), ω = 2πk, α = a − c, β = b − c (the transform of a rectangle, e.g. Bracewell
 * 2000, ch. 6), sampled and transformed back: x(p) = (1/n)·Σ_j F(k_j)·e^{+i2πk_j(p − c)}. Added into re/im.
 */
function addBoxImage(re: Float64Array, im: Float64Array, n: number, a: number, b: number, ar: number, ai: number): void {
  const c = Math.floor(n / 2), al = a - c, be = b - c;
  const Fr = new Float64Array(n), Fi = new Float64Array(n);
  for (let j = 0; j < n; j++) {
    const w = (2 * Math.PI * (j - c)) / n;
    if (j === c) { Fr[j] = be - al; continue; }
    // (e^{−iωα} − e^{−iωβ})/(iω) = [sin(ωβ) − sin(ωα)]/ω + i·[cos(ωβ) − cos(ωα)]/ω
    Fr[j] = (Math.sin(w * be) - Math.sin(w * al)) / w;
    Fi[j] = (Math.cos(w * be) - Math.cos(w * al)) / w;
  }
  for (let p = 0; p < n; p++) {
    let sr = 0, si = 0;
    for (let j = 0; j < n; j++) {
      const th = (2 * Math.PI * (j - c) * (p - c)) / n, cs = Math.cos(th), sn = Math.sin(th);
      sr += Fr[j]! * cs - Fi[j]! * sn; si += Fr[j]! * sn + Fi[j]! * cs;
    }
    sr /= n; si /= n;
    re[p] = re[p]! + ar * sr - ai * si; im[p] = im[p]! + ar * si + ai * sr;
  }
}

describe("fitReadDisplacement on closed-form images", () => {
  // one read line, 64 pixels shown of 128 acquired: water [20, 34), fat [34, 44) against it, a second water
  // tissue [44, 50) beyond; fat as two lines (−3.4 and −2.6 ppm at 3 T and 250 Hz/px: −1.74 and −1.33 px)
  const nR = 64, nW = 128, o = nW / 2 - nR / 2;
  const fatLines = [{ px: -1.74, amp: 0.85, phase: 2.1 }, { px: -1.33, amp: 0.15, phase: -0.7 }];
  const parts: DisplacedPart[] = [
    { map: boxMap(nW, o + 20, o + 34), lines: [{ px: 0, amp: 1, phase: 0 }] },
    { map: boxMap(nW, o + 34, o + 44), lines: fatLines },
    { map: boxMap(nW, o + 44, o + 50), lines: [{ px: 0, amp: 1, phase: 0 }] },
  ];
  const image = (s: number) => {
    const re = new Float64Array(nW), im = new Float64Array(nW);
    addBoxImage(re, im, nW, o + 20 + s, o + 34 + s, 0.6, 0.3);
    for (const l of fatLines) addBoxImage(re, im, nW, o + 34 + s + l.px, o + 44 + s + l.px, 1.1 * l.amp * Math.cos(l.phase + 0.4), 1.1 * l.amp * Math.sin(l.phase + 0.4));
    addBoxImage(re, im, nW, o + 44 + s, o + 50 + s, 0.3, -0.2);
    return { re: re.subarray(o, o + nR), im: im.subarray(o, o + nR) };
  };
  const signal = boxMap(nW, o + 20, o + 50).subarray(o, o + nR);

  for (const s of [0, 0.4, -1.5, 2.75]) {
    it(`a displacement of ${s} px is found within 0.01 px, water against fat that overlaps it`, () => {
      const { re, im } = image(s);
      const f = fitReadDisplacement(re, im, signal, nR, 1, parts, { range: [-4, 4], nW });
      expect(f.lines).toBe(1);
      expect(Math.abs(f.px! - s)).toBeLessThan(0.01);
    });
  }

  it("fat drawn at the wrong chemical shift leaves a residual the right one does not", () => {
    const { re, im } = image(0.4);
    const wrong = parts.map((p, j) => (j === 1 ? { ...p, lines: p.lines.map((l) => ({ ...l, px: -l.px })) } : p));
    const good = fitReadDisplacement(re, im, signal, nR, 1, parts, { range: [-4, 4], nW });
    const bad = fitReadDisplacement(re, im, signal, nR, 1, wrong, { range: [-4, 4], nW });
    expect(good.residual).toBeLessThan(0.01);
    expect(bad.residual).toBeGreaterThan(5 * good.residual);
  });
});

describe("check --verify: mean displacement along read on the torso (water against fat), against Δf/BW per pixel", () => {
  // 64 × 64 over 24 × 26 cm (no fold along phase, so no fold-free reference scan), 250 Hz/px at 3 T
  const BW = 250;
  const torso = JSON.parse(readFileSync(resolve(__dirname, "../phantoms/torso-slice.json"), "utf8")) as Record<string, unknown>;
  const verifyRow = async (b0: string | null, protocol = "gre-t1-3t") => {
    const dir = tempDir();
    const ph = writeJson(dir, "torso.json", b0 === null ? torso : { ...torso, b0: { expression: b0 } });
    const o = { protocol, set: ["matrix.read=64", "matrix.phase=64", "fov.phase=26 cm"], threshold: [] };
    const { result } = runCheck(ph, o);
    const v = await verifyCheck(join(ph), o, result, { workers: 1, iso: { t2primeIsochromats: 1 } });
    return v.rows.find((r) => r.quantity === "mean displacement along read (B0)")!;
  };
  const measure = async (b0: string | null) => (await verifyRow(b0)).values!;

  it("no B0: 0 px within 0.1 px (the fat beside the water is not taken for a displacement)", async () => {
    const m = await measure(null);
    expect(m.predicted).toBe(0);
    expect(Math.abs(m.measured!)).toBeLessThan(0.1);
  });

  it("a uniform offset of 375 Hz: 375/250 = 1.5 px toward +read within 0.1 px", async () => {
    const m = await measure("375");
    expect(Math.abs(m.measured! - 375 / BW)).toBeLessThan(0.1);
  });

  it("−200 Hz plus a gradient along phase (1500 Hz/m): each read line moves by its own Δf/BW (a straight line over the rows, slope 1500·4.06 mm/250 px per row)", () => {
    const p = loadProtocol("gre-t1-3t", ["matrix.read=64", "matrix.phase=64", "fov.phase=26 cm"]);
    const r = runPipeline(p, { ...torso, b0: { expression: "-200 + 1500 * y" } }, { t2primeIsochromats: 1 });
    const axes = logicalAxes(p), nR = 64, nP = 64, dx = p.fov.read / nR, dy = p.fov.phase / nP, position = p.slice.position;
    expect(axes.phase).toEqual([0, 1, 0]);
    const truth = truthMaps(r.phantom, { axes, nRead: nR, nPhase: nP, dx, dy, thickness: p.slice.thickness, position, offsetHz: 0 });
    const { parts, nW, stretchPerRamp } = displacedParts(r.phantom, p, r.seq, { axes, nPhase: nP, dx, dy, thickness: p.slice.thickness, position }, "multi");
    const lines: [number, number][] = [];
    const fit = fitReadDisplacement(r.image.re, r.image.im, truth.pd, nR, nP, parts, {
      range: [-3, 3], nW, maxRamp: Math.PI / 4, ...(stretchPerRamp !== undefined ? { stretchPerRamp } : {}),
      perLine: (row, px) => {
        let n = 0;
        for (let x = 0; x < nR; x++) if (truth.pd[row * nR + x]! > 0) n++;
        if (n >= 20) lines.push([row, px]); // lines through the body, not its last few pixels
      },
    });
    // least-squares straight line through the lines' shifts
    const n = lines.length, mr = lines.reduce((a, l) => a + l[0], 0) / n, ms = lines.reduce((a, l) => a + l[1], 0) / n;
    let sxy = 0, sxx = 0;
    for (const [row, px] of lines) { sxy += (row - mr) * (px - ms); sxx += (row - mr) ** 2; }
    const slope = sxy / sxx, at = (row: number) => ms + slope * (row - mr);
    const want = (row: number) => (-200 + 1500 * (row - nP / 2) * dy) / BW;
    expect(n).toBeGreaterThan(50);
    expect(Math.abs(slope / ((1500 * dy) / BW) - 1)).toBeLessThan(0.05);
    expect(Math.abs(at(nP / 2) - want(nP / 2))).toBeLessThan(0.03);
    const rms = Math.sqrt(lines.reduce((a, [row, px]) => a + (px - want(row)) ** 2, 0) / n);
    expect(rms).toBeLessThan(0.1);
    // and the mean over the body, symmetric about the isocentre along phase: −200/250 px
    expect(Math.abs(fit.px! - -200 / BW)).toBeLessThan(0.1);
  });

  it("−200 Hz plus a gradient along read (1000 Hz/m): the line stretches by 1000·3.75 mm/250 = 1.5 % about its shift; the mean, −0.8 px, within 0.1 px", async () => {
    // the body outline is symmetric about the isocentre along read (the FOV crops it evenly)
    const m = await measure("-200 + 1000 * x");
    expect(Math.abs(m.measured! - -200 / BW)).toBeLessThan(0.1);
  });

  it("EPI: not measured (B0 and fat move the image along phase too), and the row says so", async () => {
    const r = await verifyRow("100", "epi-1.5t");
    expect(r.values!.measured).toBeNull();
    expect(r.measured).toBe("—");
    expect(r.note).toMatch(/^not measured in EPI/);
  });
});
