/**
 * Measurements on simulated images for `isofold check --verify` and the
 * check's tests: folded signal (where the phantom has none), edge-spread
 * width along read, displacement along read (least-squares fit of the
 * tissues' truth maps); the edge-spread width
 * the check's sampling-window model predicts; and, for `isofold validate` and
 * the tests alike, Bessel J1 and the phase-correlation shift along phase.
 */
import { brentMinimum, fatShiftInput, predictOffResonanceShift, truthMaps, type TruthGrid } from "../analysis/index.js";
import { FAT_PEAKS_AMPLITUDE, FAT_PEAKS_PPM, FAT_SINGLE_PPM, GAMMA_BAR } from "../constants.js";
import type { FatModel, Phantom, Tissue } from "../phantom/index.js";
import type { Protocol } from "../protocol/index.js";
import { fftc1, ifftc1 } from "../recon/fft.js";
import { sequenceDefinition, type Sequence } from "../sequence/index.js";

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

/** One part of the image for {@link fitReadDisplacement}: a truth map and the spectral lines it is made of. */
export interface DisplacedPart {
  /** Row-major [phase][read] map of the part (e.g. a tissue's water or fat signal fraction times its proton density). */
  map: ArrayLike<number>;
  /** Its spectral lines: displacement along read (px) relative to water, relative amplitude and phase (rad) at the echo. */
  lines: { px: number; amp: number; phase: number }[];
}

export interface ReadDisplacementFit {
  /** Mean displacement (px) over the fitted read lines, each weighted by its pixels with signal; null when no line could be fitted. */
  px: number | null;
  /** Read lines fitted. */
  lines: number;
  /** Residual energy of the fit over the image energy of those lines (0 = the model explains the image). */
  residual: number;
}

/**
 * The parts of the image {@link fitReadDisplacement} fits, from the phantom: per tissue in the plane its
 * water (fraction 1 − fatFraction) and its fat (fatFraction), each a truth map (partial volume, proton
 * density) on a grid as wide as the read FOV acquired (`nW` = the sequence's read samples, same pixel size).
 * Fat is the isochromats' spectrum (six peaks, Hamilton et al. 2011, or the single −3.4 ppm line: the
 * tissue's or `fatModel`): each peak moved by its chemical shift, Δf/BW per pixel (the closed form of the
 * fat-shift check), with the phase −2π·Δf·TE it has gathered at the echo (free precession multiplies Mxy
 * by e^{−i2πΔf·t}: DEVELOPERS.md, Physics conventions; none where a refocusing pulse brings it back at the
 * echo). Also the stretch that goes with a phase ramp (see fitReadDisplacement).
 */
export function displacedParts(
  ph: Phantom, p: Protocol, seq: Sequence, grid: Omit<TruthGrid, "nRead" | "offsetHz">, fatModel: FatModel,
): { parts: DisplacedPart[]; nW: number; stretchPerRamp?: number } {
  const nW = Math.max(seq.image.read, seq.grid.read);
  const g: TruthGrid = { ...grid, nRead: nW, offsetHz: 0 };
  const fatIn = fatShiftInput(p, seq);
  const tau = sequenceDefinition(p.sequence).refocuses(p) ? 0 : p.te;
  const parts: DisplacedPart[] = [];
  ph.tissues.forEach((t, i) => {
    // this tissue alone: the others' proton density 0 (the shapes, and so which tissue owns a point, unchanged)
    const map = truthMaps({ ...ph, tissues: ph.tissues.map((u, k) => (k === i ? u : { ...u, pd: 0 })) }, g, "pd-fat").pd;
    if (!map.some((v) => v > 0)) return;
    const scaled = (f: number) => map.map((v) => v * f);
    if (t.fatFraction < 1) parts.push({ map: scaled(1 - t.fatFraction), lines: [{ px: 0, amp: 1, phase: 0 }] });
    if (t.fatFraction > 0) {
      const single = (t.fatModel ?? fatModel) === "single";
      const ppm: readonly number[] = single ? [FAT_SINGLE_PPM] : FAT_PEAKS_PPM;
      const amp: readonly number[] = single ? [1] : FAT_PEAKS_AMPLITUDE;
      const sum = amp.reduce((a, b) => a + b, 0);
      parts.push({
        map: scaled(t.fatFraction),
        lines: ppm.map((v, k) => {
          const hz = v * 1e-6 * GAMMA_BAR * p.field;
          return { px: predictOffResonanceShift(fatIn, hz).readout.px, amp: amp[k]! / sum, phase: -2 * Math.PI * hz * tau };
        }),
      });
    }
  });
  // a gradient along read moves and phases together (ReadDisplacementOptions.stretchPerRamp); after a refocusing pulse no ramp tells it
  return { parts, nW, ...(tau > 0 ? { stretchPerRamp: -(fatIn.readSign ?? 1) / (2 * Math.PI * tau * p.pixelBandwidth) } : {}) };
}

/**
 * Solves the Hermitian system G·a = h (m unknowns, complex; G row-major as gr/gi) by Gaussian elimination
 * with partial pivoting, a small ridge added to the diagonal so that a part with (nearly) no signal in a
 * line does not make it singular. Returns a as [re, im].
 */
function solveComplex(gr: Float64Array, gi: Float64Array, hr: Float64Array, hi: Float64Array, m: number): [Float64Array, Float64Array] {
  let tr = 0;
  for (let j = 0; j < m; j++) tr += gr[j * m + j]!;
  const ridge = (1e-9 * tr) / Math.max(1, m) + 1e-300;
  for (let j = 0; j < m; j++) gr[j * m + j] = gr[j * m + j]! + ridge;
  for (let col = 0; col < m; col++) {
    let piv = col, best = -1;
    for (let r = col; r < m; r++) { const a = Math.hypot(gr[r * m + col]!, gi[r * m + col]!); if (a > best) { best = a; piv = r; } }
    if (piv !== col) {
      for (let k = 0; k < m; k++) {
        let t = gr[col * m + k]!; gr[col * m + k] = gr[piv * m + k]!; gr[piv * m + k] = t;
        t = gi[col * m + k]!; gi[col * m + k] = gi[piv * m + k]!; gi[piv * m + k] = t;
      }
      let t = hr[col]!; hr[col] = hr[piv]!; hr[piv] = t;
      t = hi[col]!; hi[col] = hi[piv]!; hi[piv] = t;
    }
    const pr = gr[col * m + col]!, pi = gi[col * m + col]!, pd = pr * pr + pi * pi;
    for (let r = col + 1; r < m; r++) {
      // f = G[r][col] / G[col][col]
      const ar = gr[r * m + col]!, ai = gi[r * m + col]!;
      const fr = (ar * pr + ai * pi) / pd, fi = (ai * pr - ar * pi) / pd;
      for (let k = col; k < m; k++) {
        const br = gr[col * m + k]!, bi = gi[col * m + k]!;
        gr[r * m + k] = gr[r * m + k]! - (fr * br - fi * bi);
        gi[r * m + k] = gi[r * m + k]! - (fr * bi + fi * br);
      }
      hr[r] = hr[r]! - (fr * hr[col]! - fi * hi[col]!);
      hi[r] = hi[r]! - (fr * hi[col]! + fi * hr[col]!);
    }
  }
  const xr = new Float64Array(m), xi = new Float64Array(m);
  for (let r = m - 1; r >= 0; r--) {
    let sr = hr[r]!, si = hi[r]!;
    for (let k = r + 1; k < m; k++) {
      const br = gr[r * m + k]!, bi = gi[r * m + k]!;
      sr -= br * xr[k]! - bi * xi[k]!; si -= br * xi[k]! + bi * xr[k]!;
    }
    const pr = gr[r * m + r]!, pi = gi[r * m + r]!, pd = pr * pr + pi * pi;
    xr[r] = (sr * pr + si * pi) / pd; xi[r] = (si * pr - sr * pi) / pd;
  }
  return [xr, xi];
}

/** Inverse of the Hermitian m × m matrix (gr, gi): one solveComplex per column of the identity (each with its small ridge). */
function invertComplex(gr: Float64Array, gi: Float64Array, m: number): [Float64Array, Float64Array] {
  const ir = new Float64Array(m * m), ii = new Float64Array(m * m);
  for (let col = 0; col < m; col++) {
    const er = new Float64Array(m), ei = new Float64Array(m);
    er[col] = 1;
    const [xr, xi] = solveComplex(Float64Array.from(gr), Float64Array.from(gi), er, ei, m);
    for (let r = 0; r < m; r++) { ir[r * m + col] = xr[r]!; ii[r * m + col] = xi[r]!; }
  }
  return [ir, ii];
}

/** Options of {@link fitReadDisplacement}. */
export interface ReadDisplacementOptions {
  /** Shifts (px) searched. */
  range: [number, number];
  /** Width of the parts' maps (≥ the image's nR; the image's columns in their middle). */
  nW?: number;
  /** Largest phase ramp along read (rad per pixel) the image may carry beside the parts' own phases. */
  maxRamp?: number;
  /**
   * Stretch along read (px of displacement per px) that goes with a phase ramp of 1 rad/px, where both come
   * from one off-resonance gradient along read: a gradient g (Hz/px) gathers the ramp −2π·g·τ by the echo
   * (τ the dephasing time, TE without a refocusing pulse) and moves the line's points by g/BW per px more
   * at each px (times the readout's sign), so the stretch is −sign/(2π·τ·BW). Given, each line's shift is
   * taken at the centroid of its pixels with signal rather than where its edges lie.
   */
  stretchPerRamp?: number;
  /** Sees each line's shift (px), ramp (rad/px) and relative residual. */
  perLine?: (row: number, px: number, ramp: number, residual: number) => void;
}

/**
 * Displacement along read of everything in the image by one off-resonance shift per read line, by least
 * squares: each read line of the complex image is fitted as e^{iβ(x − c)}·Σ_j a_j·P_j(x − s), P_j a part's
 * truth map with its spectral lines (water: one line at 0; fat: its peaks at their chemical shifts,
 * amplitudes and phases), each part with its own complex amplitude a_j (linear, solved for every s and β),
 * all with one shift s (a grid of 0.25 px over `range`, then Brent's minimization (brentMinimum) to 0.001 px) and one
 * phase ramp β (the phase an off-resonance gradient along read gathers by the echo: every ramp of the
 * zero-padded Fourier transform within ±maxRamp, then Brent's minimization). A part's template is moved
 * in k-space (Fourier shift theorem: f(x − s) ↔ F(k)·e^{−i2πks}), so moving it by a fraction of a pixel
 * does not blur it. Water and fat touching each other, and their cancellation where they share a pixel
 * out of phase, are modelled rather than taken as displacement. With `stretchPerRamp` a line's shift is
 * moved from where its edges lie to the centroid of its pixels with signal (a gradient along read
 * stretches the line). The result is the mean of the lines' shifts weighted by the pixels with signal in
 * each line (the same weighting as a mean of Δf over the phantom's points). `re`, `im`: the image [phase][read], nR × nP; `signal`: the truth's proton density
 * map on it; the parts' maps are `nW` ≥ nR wide (signal beyond the displayed FOV moves into it).
 */
export function fitReadDisplacement(
  re: ArrayLike<number>, im: ArrayLike<number>, signal: ArrayLike<number>, nR: number, nP: number, parts: DisplacedPart[], opts: ReadDisplacementOptions,
): ReadDisplacementFit {
  const nW = opts.nW ?? nR, range = opts.range, maxRamp = opts.maxRamp ?? 0;
  const o = Math.floor(nW / 2) - Math.floor(nR / 2);
  const c = Math.floor(nW / 2), cR = Math.floor(nR / 2);
  // ramps on the grid of a 2× zero-padded transform of the line: β_q = 2πq/L
  const L = 2 * nR, cL = Math.floor(L / 2);
  const STEP = 0.25;
  const qMax = Math.min(cL - 1, Math.floor((maxRamp * L) / (2 * Math.PI)));
  // each part's spectral kernel: Σ_lines amp·e^{iφ}·e^{−i2π(k−c)·d/nW}
  const kernels = parts.map((pt) => {
    const kr = new Float64Array(nW), ki = new Float64Array(nW);
    for (let k = 0; k < nW; k++) {
      for (const l of pt.lines) {
        const th = l.phase - (2 * Math.PI * (k - c) * l.px) / nW;
        kr[k] = kr[k]! + l.amp * Math.cos(th); ki[k] = ki[k]! + l.amp * Math.sin(th);
      }
    }
    return { kr, ki };
  });
  let sumW = 0, sumWS = 0, resAll = 0, energyAll = 0, fitted = 0;
  const yr = new Float64Array(nR), yi = new Float64Array(nR), pc = new Float64Array(nW), ps = new Float64Array(nW);
  const rc = new Float64Array(nR), rs = new Float64Array(nR);
  for (let r = 0; r < nP; r++) {
    let w = 0;
    for (let x = 0; x < nR; x++) if (signal[r * nR + x]! > 0) w++;
    if (w === 0) continue;
    const present: number[] = [];
    parts.forEach((pt, j) => { for (let x = 0; x < nW; x++) if (pt.map[r * nW + x]! !== 0) { present.push(j); break; } });
    const m = present.length;
    if (m === 0) continue;
    // the parts' spectra on this line
    const S = present.map((j) => {
      const sr = new Float64Array(nW), si = new Float64Array(nW);
      for (let x = 0; x < nW; x++) sr[x] = parts[j]!.map[r * nW + x]!;
      fftc1(sr, si, nW);
      const { kr, ki } = kernels[j]!;
      for (let k = 0; k < nW; k++) { const a = sr[k]!, b = si[k]!; sr[k] = a * kr[k]! - b * ki[k]!; si[k] = a * ki[k]! + b * kr[k]!; }
      return { sr, si };
    });
    let energy = 0;
    for (let x = 0; x < nR; x++) { yr[x] = re[r * nR + x]!; yi[x] = im[r * nR + x]!; energy += yr[x]! * yr[x]! + yi[x]! * yi[x]!; }
    if (!(energy > 0)) continue;
    const br = present.map(() => new Float64Array(nW)), bi = present.map(() => new Float64Array(nW));
    // z_j = conj(template_j)·y over the shown columns, and its zero-padded transform H_j(β) = Σ_x z_j(x)·e^{−iβ(x − cR)}
    const zr = present.map(() => new Float64Array(nR)), zi = present.map(() => new Float64Array(nR));
    const Hr = present.map(() => new Float64Array(L)), Hi = present.map(() => new Float64Array(L));
    const gr = new Float64Array(m * m), gi = new Float64Array(m * m), hr = new Float64Array(m), hi = new Float64Array(m);
    let ir: Float64Array = new Float64Array(0), ii: Float64Array = new Float64Array(0);
    // Re(hᴴ·G⁻¹·h): the energy the best amplitudes explain
    const explained = (): number => {
      let f = 0;
      for (let a = 0; a < m; a++) {
        let tr = 0, ti = 0;
        for (let b = 0; b < m; b++) { const vr = ir[a * m + b]!, vi = ii[a * m + b]!; tr += vr * hr[b]! - vi * hi[b]!; ti += vr * hi[b]! + vi * hr[b]!; }
        f += hr[a]! * tr + hi[a]! * ti;
      }
      return f;
    };
    const atRamp = (beta: number): number => {
      for (let x = 0; x < nR; x++) { const th = -beta * (x - cR); rc[x] = Math.cos(th); rs[x] = Math.sin(th); }
      for (let a = 0; a < m; a++) {
        const ar = zr[a]!, ai = zi[a]!;
        let sr = 0, si = 0;
        for (let x = 0; x < nR; x++) { sr += ar[x]! * rc[x]! - ai[x]! * rs[x]!; si += ar[x]! * rs[x]! + ai[x]! * rc[x]!; }
        hr[a] = sr; hi[a] = si;
      }
      return -explained();
    };
    // the best amplitudes G⁻¹·h at the last shift and ramp evaluated
    const ampsAt = (): [Float64Array, Float64Array] => {
      const xr = new Float64Array(m), xi = new Float64Array(m);
      for (let a = 0; a < m; a++) for (let b = 0; b < m; b++) {
        const vr = ir[a * m + b]!, vi = ii[a * m + b]!;
        xr[a] = xr[a]! + vr * hr[b]! - vi * hi[b]!; xi[a] = xi[a]! + vr * hi[b]! + vi * hr[b]!;
      }
      return [xr, xi];
    };
    let lastRamp = 0;
    const cost = (s: number, refine = true): number => {
      for (let k = 0; k < nW; k++) { const th = (-2 * Math.PI * (k - c) * s) / nW; pc[k] = Math.cos(th); ps[k] = Math.sin(th); }
      for (let a = 0; a < m; a++) {
        const { sr, si } = S[a]!, tr = br[a]!, ti = bi[a]!;
        for (let k = 0; k < nW; k++) {
          const cs = pc[k]!, sn = ps[k]!;
          tr[k] = sr[k]! * cs - si[k]! * sn; ti[k] = sr[k]! * sn + si[k]! * cs;
        }
        ifftc1(tr, ti, nW);
      }
      for (let a = 0; a < m; a++) {
        const ar = br[a]!, ai = bi[a]!, qr = zr[a]!, qi = zi[a]!;
        for (let x = 0; x < nR; x++) { const u = x + o; qr[x] = ar[u]! * yr[x]! + ai[u]! * yi[x]!; qi[x] = ar[u]! * yi[x]! - ai[u]! * yr[x]!; }
        for (let b = a; b < m; b++) {
          const cr = br[b]!, ci = bi[b]!;
          let gR = 0, gI = 0;
          for (let x = o; x < o + nR; x++) { gR += ar[x]! * cr[x]! + ai[x]! * ci[x]!; gI += ar[x]! * ci[x]! - ai[x]! * cr[x]!; }
          gr[a * m + b] = gR; gi[a * m + b] = gI; gr[b * m + a] = gR; gi[b * m + a] = -gI;
        }
      }
      [ir, ii] = invertComplex(gr, gi, m);
      if (qMax <= 0) { lastRamp = 0; return energy + atRamp(0); }
      // every ramp of the padded transform, then the best one refined between its neighbours
      for (let a = 0; a < m; a++) {
        const tr = Hr[a]!, ti = Hi[a]!;
        tr.fill(0); ti.fill(0);
        for (let x = 0; x < nR; x++) { tr[x - cR + cL] = zr[a]![x]!; ti[x - cR + cL] = zi[a]![x]!; }
        fftc1(tr, ti, L);
      }
      let qBest = 0, fBest = -Infinity;
      for (let q = -qMax; q <= qMax; q++) {
        for (let a = 0; a < m; a++) { hr[a] = Hr[a]![cL + q]!; hi[a] = Hi[a]![cL + q]!; }
        const f = explained();
        if (f > fBest) { fBest = f; qBest = q; }
      }
      const step = (2 * Math.PI) / L;
      if (!refine) { lastRamp = qBest * step; return energy - fBest; }
      lastRamp = brentMinimum(atRamp, (qBest - 1) * step, (qBest + 1) * step, step / 64);
      return energy + atRamp(lastRamp);
    };
    // the grid with the ramps of the padded transform alone, then refined
    let sBest = range[0], cBest = Infinity;
    for (let s = range[0]; s <= range[1] + 1e-9; s += STEP) { const v = cost(s, false); if (v < cBest) { cBest = v; sBest = s; } }
    let s = brentMinimum((v) => cost(v), sBest - STEP, sBest + STEP, 1e-3);
    const res = Math.max(0, cost(s));
    if (opts.stretchPerRamp !== undefined && lastRamp !== 0) {
      // a stretched line: the fit's shift is its displacement where the model's slope lies, weighted by
      // |Σ_j a_j·P_j′|² (to first order); moved to the centroid of the line's pixels with signal
      const [ar, ai] = ampsAt();
      const dr = new Float64Array(nW), di = new Float64Array(nW);
      for (let a = 0; a < m; a++) {
        const { sr, si } = S[a]!, tr = new Float64Array(nW), ti = new Float64Array(nW);
        for (let k = 0; k < nW; k++) {
          // F(k)·e^{−i2πks}·i2πk: the template's derivative along read
          const th = (-2 * Math.PI * (k - c) * s) / nW, cs = Math.cos(th), sn = Math.sin(th), f = (2 * Math.PI * (k - c)) / nW;
          const ur = sr[k]! * cs - si[k]! * sn, ui = sr[k]! * sn + si[k]! * cs;
          tr[k] = -f * ui; ti[k] = f * ur;
        }
        ifftc1(tr, ti, nW);
        for (let x = 0; x < nW; x++) { dr[x] = dr[x]! + ar[a]! * tr[x]! - ai[a]! * ti[x]!; di[x] = di[x]! + ar[a]! * ti[x]! + ai[a]! * tr[x]!; }
      }
      let sw = 0, swx = 0, n = 0, nx = 0;
      for (let x = 0; x < nR; x++) {
        const q = dr[x + o]! * dr[x + o]! + di[x + o]! * di[x + o]!;
        sw += q; swx += q * x;
        if (signal[r * nR + x]! > 0) { n++; nx += x; }
      }
      if (sw > 0 && n > 0) s -= opts.stretchPerRamp * lastRamp * (swx / sw - nx / n);
    }
    opts.perLine?.(r, s, lastRamp, res / energy);
    sumW += w; sumWS += w * s; resAll += res; energyAll += energy; fitted++;
  }
  return { px: fitted ? sumWS / sumW : null, lines: fitted, residual: energyAll > 0 ? resAll / energyAll : 0 };
}
