/**
 * Measurements on simulated images for `isofold check --verify` and the
 * check's tests: folded signal (where the phantom has none), edge-spread
 * width along read, mean displacement along read; the edge-spread width
 * the check's sampling-window model predicts; and, for `isofold validate` and
 * the tests alike, Bessel J1 and the phase-correlation shift along phase.
 */
import type { Tissue } from "../phantom/index.js";
import type { Protocol } from "../protocol/index.js";
import { fftc1, ifftc1 } from "../recon/fft.js";
import type { Sequence } from "../sequence/index.js";

export interface FoldedMeasurement {
  /** Image rows holding folded pixels; first and last such row (null when none). */
  rows: number;
  firstRow: number | null;
  lastRow: number | null;
  /** Folded pixels inside the ROI and their share of the ROI's image energy (Σ|m|²). */
  roiPixels: number;
  roiEnergyFraction: number;
  /** The magnitude level pixels were judged against. */
  level: number;
}

/**
 * Folded pixels: the truth (unfolded phantom on the image grid) is empty within
 * `reach` pixels (default 1: blur and ringing next to an object do not count;
 * pass the predicted fat shift and distortion so that shifted signal does not either)
 * and the magnitude exceeds `fraction` of the median magnitude over the
 * phantom's pixels (of the largest magnitude when none lies in the image).
 */
export function foldedSignal(
  mag: ArrayLike<number>, pd: ArrayLike<number>, nR: number, nP: number, inRoi: (col: number, row: number) => boolean, fraction = 0.3,
  reach: { read: number; phase: number } = { read: 1, phase: 1 },
): FoldedMeasurement {
  const vals: number[] = [];
  for (let i = 0; i < nR * nP; i++) if (pd[i]! > 0) vals.push(mag[i]!);
  vals.sort((a, b) => a - b);
  // no phantom in the image (everything folds in from outside): judge against the brightest pixel
  let max = 0;
  for (let i = 0; i < nR * nP; i++) max = Math.max(max, mag[i]!);
  const level = vals.length ? vals[Math.floor(vals.length / 2)]! : max;
  const near = (r: number, c: number): boolean => {
    for (let a = -reach.phase; a <= reach.phase; a++) for (let b = -reach.read; b <= reach.read; b++) {
      const rr = r + a, cc = c + b;
      if (rr >= 0 && rr < nP && cc >= 0 && cc < nR && pd[rr * nR + cc]! > 0) return true;
    }
    return false;
  };
  const rows = new Set<number>();
  let roiPixels = 0, roiFolded = 0, roiAll = 0;
  for (let r = 0; r < nP; r++) for (let c = 0; c < nR; c++) {
    const m = mag[r * nR + c]!;
    const roi = inRoi(c, r);
    if (roi) roiAll += m * m;
    if (!(m > fraction * level) || near(r, c)) continue;
    rows.add(r);
    if (roi) { roiPixels++; roiFolded += m * m; }
  }
  const list = [...rows].sort((a, b) => a - b);
  return {
    rows: rows.size, firstRow: list.length ? list[0]! : null, lastRow: list.length ? list[list.length - 1]! : null,
    roiPixels, roiEnergyFraction: roiAll > 0 ? roiFolded / roiAll : 0, level,
  };
}

/**
 * Folded signal as the difference between the image and a reference image of
 * the same scan with enough phase oversampling that nothing folds: pixels
 * where |image − reference| exceeds `fraction` of `level`.
 */
export function foldedByDifference(
  mag: ArrayLike<number>, diff: ArrayLike<number>, level: number, nR: number, nP: number, inRoi: (col: number, row: number) => boolean, fraction = 0.3,
): FoldedMeasurement {
  const rows = new Set<number>();
  let roiPixels = 0, roiFolded = 0, roiAll = 0;
  for (let r = 0; r < nP; r++) for (let c = 0; c < nR; c++) {
    const i = r * nR + c, d = diff[i]!;
    const roi = inRoi(c, r);
    if (roi) { roiAll += mag[i]! * mag[i]!; roiFolded += d * d; }
    if (!(d > fraction * level)) continue;
    rows.add(r);
    if (roi) roiPixels++;
  }
  const list = [...rows].sort((a, b) => a - b);
  return {
    rows: rows.size, firstRow: list.length ? list[0]! : null, lastRow: list.length ? list[list.length - 1]! : null,
    roiPixels, roiEnergyFraction: roiAll > 0 ? roiFolded / roiAll : 0, level,
  };
}

/** 10–90 % rise distance (px) of an edge in a finely sampled profile `f` (step `h` px) at index `e`, plateaus taken `plateau` px either side. */
function riseWidth(f: Float64Array, e: number, h: number, plateau: number): number | null {
  const k = Math.round(plateau / h);
  if (e - k < 0 || e + k >= f.length) return null;
  const a = f[e - k]!, b = f[e + k]!;
  if (Math.abs(b - a) < 1e-12) return null;
  const at = (level: number): number | null => {
    const target = a + level * (b - a);
    // the crossing nearest to the edge
    for (let d = 0; d <= k; d++) {
      for (const j of [e + d, e - d - 1]) {
        if (j < e - k || j + 1 > e + k) continue;
        const y0 = f[j]!, y1 = f[j + 1]!;
        if ((y0 - target) * (y1 - target) <= 0 && y0 !== y1) return j + (target - y0) / (y1 - y0);
      }
    }
    return null;
  };
  const x10 = at(0.1), x90 = at(0.9);
  return x10 === null || x90 === null ? null : Math.abs(x90 - x10) * h;
}

const UP = 8;

/**
 * Edge-spread width along read on a complex image [phase][read]: the row and
 * column of the largest magnitude step between neighbours (away from the
 * borders, among the steps `ok` accepts); the row is interpolated 8× (zero-padded in k-space) and the 10–90 %
 * rise measured between plateaus 3 px either side.
 */
export function edgeWidthImage(
  re: ArrayLike<number>, im: ArrayLike<number>, nR: number, nP: number, ok: (row: number, brightCol: number, darkCol: number) => boolean = () => true,
): { row: number; col: number; brightCol: number; width: number } | null {
  let best = 0, br = -1, bc = -1;
  for (let r = 0; r < nP; r++) for (let c = 4; c < nR - 5; c++) {
    const m0 = Math.hypot(re[r * nR + c]!, im[r * nR + c]!), m1 = Math.hypot(re[r * nR + c + 1]!, im[r * nR + c + 1]!);
    if (!(m1 > m0 ? ok(r, c + 1, c) : ok(r, c, c + 1))) continue;
    if (Math.abs(m1 - m0) > best) { best = Math.abs(m1 - m0); br = r; bc = c; }
  }
  if (br < 0) return null;
  const lr = new Float64Array(nR), li = new Float64Array(nR);
  for (let c = 0; c < nR; c++) { lr[c] = re[br * nR + c]!; li[c] = im[br * nR + c]!; }
  fftc1(lr, li, nR);
  const N = UP * nR, pr = new Float64Array(N), pi = new Float64Array(N);
  const off = Math.floor(N / 2) - Math.floor(nR / 2);
  for (let j = 0; j < nR; j++) { pr[off + j] = lr[j]!; pi[off + j] = li[j]!; }
  ifftc1(pr, pi, N);
  const f = new Float64Array(N);
  for (let j = 0; j < N; j++) f[j] = Math.hypot(pr[j]!, pi[j]!);
  // fine index of pixel c is (c − ⌊nR/2⌋)·UP + ⌊N/2⌋; the edge lies between c and c+1
  const e = (bc - Math.floor(nR / 2)) * UP + Math.floor(N / 2) + UP / 2;
  const width = riseWidth(f, e, 1 / UP, 3);
  if (width === null) return null;
  const m0 = Math.hypot(re[br * nR + bc]!, im[br * nR + bc]!), m1 = Math.hypot(re[br * nR + bc + 1]!, im[br * nR + bc + 1]!);
  return { row: br, col: bc, brightCol: m1 > m0 ? bc + 1 : bc, width };
}

/**
 * Predicted 10–90 % edge-spread width (px) along read for a tissue: an edge
 * (a box of half the matrix) imaged through the readout's sampling window,
 * each sample weighted by the decay at its time from the echo (gradient echo:
 * e^{−t/T2*}; spin echo: e^{−|t|/T2′}·e^{−t/T2}), samples skipped by an
 * asymmetric echo zero; f(x) = Σ_j w_j·F(k_j)·e^{i2πk_j·x} with the box's
 * transform F(k) = (1 − e^{−i2πkA})/(i2πk), evaluated every 1/8 px.
 */
export function edgeWidthPredicted(p: Protocol, seq: Sequence, t: Tissue): number | null {
  const N = p.matrix.read, A = N / 2;
  const tAcq = 1 / p.pixelBandwidth;
  const refocused = p.sequence === "se" || p.sequence === "rare";
  const t2p = t.t2star < t.t2 ? 1 / (1 / t.t2star - 1 / t.t2) : Infinity;
  const firstSample = p.partialFourier.read < 1 ? Math.round((seq.grid.offset * N) / seq.grid.read) : 0;
  const wre: number[] = [], fre: number[] = [], fim: number[] = [], ks: number[] = [];
  for (let j = 0; j < N; j++) {
    if (j < firstSample) continue;
    const kk = (j - Math.floor(N / 2)) / N; // cycles per pixel
    const tj = kk * tAcq;
    const w = refocused ? Math.exp(-Math.abs(tj) / t2p - tj / t.t2) : Math.exp(-tj / t.t2star);
    let Fr: number, Fi: number;
    if (kk === 0) { Fr = A; Fi = 0; } else {
      // (1 − e^{−iθ})/(iθ/A)… with θ = 2πkA: (1 − cosθ + i sinθ)/(i2πk)
      const th = 2 * Math.PI * kk * A, d = 2 * Math.PI * kk;
      Fr = Math.sin(th) / d; Fi = -(1 - Math.cos(th)) / d;
    }
    wre.push(w); fre.push(Fr); fim.push(Fi); ks.push(kk);
  }
  const h = 1 / UP, span = 6;
  const n = Math.round((2 * span) / h) + 1;
  const f = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    const x = -span + i * h;
    let sr = 0, si = 0;
    for (let j = 0; j < ks.length; j++) {
      const th = 2 * Math.PI * ks[j]! * x, c = Math.cos(th), s = Math.sin(th);
      sr += wre[j]! * (fre[j]! * c - fim[j]! * s);
      si += wre[j]! * (fre[j]! * s + fim[j]! * c);
    }
    f[i] = Math.hypot(sr, si);
  }
  return riseWidth(f, Math.round(span / h), h, 3);
}

/**
 * Mean displacement (px) of the water along read: magnitude centroid of the
 * image over the water pixels grown by 3 px, minus the truth centroid with
 * each water pixel weighted by pd times its tissue's mean image value.
 */
export function meanReadShift(
  mag: ArrayLike<number>, pd: ArrayLike<number>, label: ArrayLike<number>, fatFraction: ArrayLike<number>, nR: number, nP: number,
): number | null {
  const water = (i: number) => pd[i]! > 0 && fatFraction[i]! < 0.5;
  const sum = new Map<number, [number, number]>();
  for (let i = 0; i < nR * nP; i++) if (water(i)) {
    const s = sum.get(label[i]!) ?? [0, 0];
    s[0] += mag[i]!; s[1] += pd[i]!;
    sum.set(label[i]!, s);
  }
  let tw = 0, tx = 0, iw = 0, ix = 0;
  for (let r = 0; r < nP; r++) for (let c = 0; c < nR; c++) {
    const i = r * nR + c;
    if (water(i)) {
      const s = sum.get(label[i]!)!;
      const w = pd[i]! * (s[0] / s[1]);
      tw += w; tx += w * c;
    }
    let grown = false;
    for (let d = -3; d <= 3 && !grown; d++) { const cc = c + d; if (cc >= 0 && cc < nR && water(r * nR + cc)) grown = true; }
    if (grown && !(pd[i]! > 0 && fatFraction[i]! >= 0.5)) { iw += mag[i]!; ix += mag[i]! * c; }
  }
  return tw > 0 && iw > 0 ? ix / iw - tx / tw : null;
}

/** Bessel J1 from Bessel's integral J1(x) = (1/π)∫₀^π cos(τ − x·sinτ) dτ (Watson 1944, §2.2), Simpson rule over n (even) intervals. */
export function besselJ1(x: number, n = 200): number {
  const h = Math.PI / n;
  let s = 0;
  for (let i = 0; i <= n; i++) {
    const t = i * h, f = Math.cos(t - x * Math.sin(t));
    s += (i === 0 || i === n ? 1 : i % 2 ? 4 : 2) * f;
  }
  return (s * h) / 3 / Math.PI;
}

/**
 * Sub-pixel shift of image b relative to image a along phase, by phase correlation (Kuglin & Hines 1975):
 * the cross-power spectrum along phase, C(m) = Σ_read FFT_y(b)·conj(FFT_y(a)), turns by −2π·Δ/N per
 * frequency step; Δ comes from the mean step arg Σ_m C(m+1)·conj(C(m)) over |m| ≤ N/4, which needs no
 * phase unwrapping (direct DFT, no library). Images are [phase][read], read fastest.
 */
export function phaseShiftPx(a: { re: ArrayLike<number>; im: ArrayLike<number> }, b: { re: ArrayLike<number>; im: ArrayLike<number> }, nPhase: number, nRead: number): number {
  const M = Math.floor(nPhase / 4);
  const cr = new Float64Array(2 * M + 1), ci = new Float64Array(2 * M + 1);
  for (let m = -M; m <= M; m++) {
    for (let x = 0; x < nRead; x++) {
      let ar = 0, ai = 0, br = 0, bi = 0;
      for (let y = 0; y < nPhase; y++) {
        const th = (-2 * Math.PI * m * y) / nPhase, c = Math.cos(th), s = Math.sin(th);
        const i = y * nRead + x;
        ar += a.re[i]! * c - a.im[i]! * s; ai += a.re[i]! * s + a.im[i]! * c;
        br += b.re[i]! * c - b.im[i]! * s; bi += b.re[i]! * s + b.im[i]! * c;
      }
      cr[m + M]! += br * ar + bi * ai;
      ci[m + M]! += bi * ar - br * ai;
    }
  }
  let sr = 0, si = 0;
  for (let k = 0; k < 2 * M; k++) {
    sr += cr[k + 1]! * cr[k]! + ci[k + 1]! * ci[k]!;
    si += ci[k + 1]! * cr[k]! - cr[k + 1]! * ci[k]!;
  }
  return (-Math.atan2(si, sr) * nPhase) / (2 * Math.PI);
}
