/**
 * Fat–water chemical-shift displacement: closed-form predictions and a
 * measurement on a simulated image.
 *
 * Predictions (Bernstein, King & Zhou 2004, ch. 11 and 16; signs derived for
 * this program's conventions (DEVELOPERS.md, Physics conventions): an isochromat at logical position r
 * with offset Δf precesses at γ̄·G·r + Δf):
 *   - readout: during a readout gradient G_read a spin at u appears where
 *     γ̄·G_read·u' = γ̄·G_read·u + Δf, so Δu = Δf/(γ̄·G_read) = s_r·(Δf/BW_px)·Δx
 *     with s_r = sign(G_read) (the protocol's readout polarity): with a
 *     positive read gradient fat (Δf < 0) moves toward negative read
 *     positions, with a negative one toward positive positions; EPI
 *     alternates the read gradient from line to line, so its lines shift by
 *     ±Δf/BW_px: the image is the mean of the two copies (no net shift) and
 *     their difference is aliased to half the FOV along phase (the N/2 ghost;
 *     Bernstein, King & Zhou 2004, ch. 16);
 *   - slice: a pulse of centre frequency γ̄·G_slice·w0 excites spins where
 *     γ̄·G_slice·w + Δf = γ̄·G_slice·w0, so Δw = −Δf/(γ̄·G_slice): fat is
 *     excited toward positive slice positions for G_slice > 0; a spin echo's
 *     refocusing pulse selects its own slab, moved by −Δf/(γ̄·G_refocusing),
 *     and the echo comes from where both slabs act (their overlap);
 *   - phase, EPI only: line n is acquired at TE + (n − c)·τ with
 *     k_n = (n − c)·Δk_y·s (s = ±1, the blip direction), so the phase
 *     −2π(k_n·v + Δf·(n − c)·τ) places the spin at v + s·Δf·τ/Δk_y:
 *     Δv = s·Δf·τ/Δk_y = s·Δf·N_phase·τ pixels, where N_phase is the number of
 *     lines of the acquired grid (matrix × (1 + phase oversampling), lines a
 *     partial Fourier scan leaves out counted: Δk_y = 1/FOV_acq, so τ/Δk_y is
 *     τ·N_phase pixels of FOV/matrix; with phase oversampling this is more than
 *     the matrix), where τ is
 *     the time per phase-encoding step, the effective echo spacing ESP/shots
 *     of an interleaved (echo-time shifted) EPI (Jezzard & Balaban 1995;
 *     Feinberg & Oshio 1994). With spin-warp (one line per excitation) there
 *     is no shift along phase.
 */
import { FAT_PEAKS_AMPLITUDE, FAT_PEAKS_PPM, FAT_SINGLE_PPM, GAMMA_BAR } from "../constants.js";
import { centredLines, fft2c } from "../recon/fft.js";
import { logicalAxes, type Protocol } from "../protocol/index.js";
import type { Sequence } from "../sequence/index.js";

/** A displacement along one logical axis. */
export interface AxisShift {
  /** The closed form used. */
  note?: string;
  /** Pixels (signed, along the positive logical axis). */
  px: number;
  /** Metres (signed). */
  m: number;
  /** Physical direction the fat moves in, e.g. "-x", or "none". */
  direction: string;
  /** EPI, along read: the shift of the lines read with the first line's gradient sign (pixels); the other lines move by minus this (`px` is then 0). */
  perLinePx?: number;
}

export interface FatShiftInput {
  /** Main field (T). */
  fieldT: number;
  /** Chemical shift of fat relative to water (ppm); default the main methylene peak, −3.4 ppm. */
  ppm?: number;
  /** Readout bandwidth per pixel (Hz/px) and the pixel size along read (m). */
  pixelBandwidth: number;
  /** Sign of the read gradient during the echo (the protocol's readout polarity; EPI: of the first line); default +1. */
  readSign?: number;
  /** EPI: the read gradient alternates from line to line, so alternate lines shift in opposite directions along read (no net shift). */
  alternatingRead?: boolean;
  dxRead: number;
  /** Slice-select gradient (T/m), 0 for a non-selective pulse; slice thickness (m). */
  sliceGradient: number;
  /** Spin echoes: slice-select gradient of the refocusing pulse (T/m); absent without one. */
  refocusGradient?: number;
  /** Phase pixel size (m). */
  dyPhase: number;
  /** EPI only: time per phase-encoding step (s) = echo spacing / shots (see effectiveEchoSpacing), phase lines of the acquired grid (with phase oversampling), blip direction ±1. */
  effectiveEchoSpacing?: number;
  phaseLines?: number;
  blipSign?: number;
  /** Physical axis names and signs of the logical axes, e.g. { read: "x", phase: "y", slice: "z" }. */
  axisNames: { read: string; phase: string; slice: string };
}

export interface FatShiftPrediction {
  ppm: number;
  /** Δf of fat relative to water (Hz). */
  hz: number;
  readout: AxisShift;
  /** Slice: the excited slab's shift; spin echoes also the refocused slab's (`refocusedM`, its own gradient). */
  slice: { m: number; direction: string; note: string; refocusedM?: number; refocusedDirection?: string };
  phase: AxisShift & { note: string };
}

/** The three closed forms, written once (report.json, the protocol table and checks all quote these). */
export const READ_SHIFT_FORMULA = "Δx = sign(G_read)·Δf/BW_px pixels";
export const READ_SHIFT_ALTERNATING = "EPI: the read gradient alternates, so alternate lines move by ±Δf/BW_px pixels and there is no net shift; the object is imaged as two copies 2·Δf/BW_px apart, and the lines' difference appears as a ghost at half the FOV along phase";
export const SLICE_SHIFT_FORMULA = "Δz = −Δf/(γ̄·G_slice)";
export const SLICE_SHIFT_SPIN_ECHO = "spin echo: the excited slab moves by Δz = −Δf/(γ̄·G_excitation) and the refocused one by −Δf/(γ̄·G_refocusing); fat signal comes from where the two overlap, so with different gradients its slice lies between the two shifts and is thinner by their difference";
export const PHASE_SHIFT_FORMULA = "EPI: Δy = s_blip·Δf·N_phase·ESP/shots pixels (N_phase = phase lines of the acquired grid, phase oversampling included; ESP/shots = effective echo spacing)";

function dir(value: number, axis: string): string {
  if (value === 0 || !Number.isFinite(value)) return "none";
  return `${value > 0 ? "+" : "-"}${axis}`;
}

/** Chemical shift (ppm) → Hz at field B0: Δf = ppm·1e−6·γ̄·B0. */
export function ppmToHz(ppm: number, fieldT: number): number {
  return ppm * 1e-6 * GAMMA_BAR * fieldT;
}

/** Amplitude-weighted mean shift of the six-peak fat spectrum (ppm), about −3.0 ppm. */
export function multiPeakMeanPpm(): number {
  let s = 0, a = 0;
  FAT_PEAKS_PPM.forEach((p, k) => {
    s += p * FAT_PEAKS_AMPLITUDE[k]!;
    a += FAT_PEAKS_AMPLITUDE[k]!;
  });
  return s / a;
}


/** Displacement of a spin at off-resonance `hz` (Hz) relative to one on resonance: the fat-shift closed forms at the equivalent ppm. */
export function predictOffResonanceShift(input: FatShiftInput, hz: number): FatShiftPrediction {
  return predictFatShift({ ...input, ppm: hz / (1e-6 * GAMMA_BAR * input.fieldT) });
}

/** Readout, slice and (EPI) phase displacement of fat relative to water; see the file comment for the signs. */
export function predictFatShift(p: FatShiftInput): FatShiftPrediction {
  const ppm = p.ppm ?? FAT_SINGLE_PPM;
  const hz = ppmToHz(ppm, p.fieldT);
  // EPI: lines read with +G and −G shift by ±Δf/BW_px; each half of the lines forms the image moved one way, so the
  // image is the mean of the two copies (no net shift) plus their difference aliased to half the FOV along phase
  const perLinePx = (p.readSign ?? 1) * hz / p.pixelBandwidth;
  const readPx = p.alternatingRead ? 0 : perLinePx;
  const sliceM = p.sliceGradient !== 0 ? -hz / (GAMMA_BAR * p.sliceGradient) : 0;
  const refocusedM = p.refocusGradient ? -hz / (GAMMA_BAR * p.refocusGradient) : undefined;
  const epi = p.effectiveEchoSpacing !== undefined && p.phaseLines !== undefined;
  const phasePx = epi ? (p.blipSign ?? 1) * hz * p.phaseLines! * p.effectiveEchoSpacing! : 0;
  return {
    ppm,
    hz,
    readout: {
      px: readPx, m: readPx * p.dxRead, direction: dir(readPx, p.axisNames.read),
      ...(p.alternatingRead ? { note: READ_SHIFT_ALTERNATING, perLinePx } : { note: READ_SHIFT_FORMULA }),
    },
    slice: {
      m: sliceM,
      direction: dir(sliceM, p.axisNames.slice),
      note: p.sliceGradient !== 0 ? (refocusedM !== undefined ? SLICE_SHIFT_SPIN_ECHO : SLICE_SHIFT_FORMULA) : "non-selective excitation: no slice shift",
      ...(refocusedM !== undefined ? { refocusedM, refocusedDirection: dir(refocusedM, p.axisNames.slice) } : {}),
    },
    phase: {
      px: phasePx,
      m: phasePx * p.dyPhase,
      direction: dir(phasePx, p.axisNames.phase),
      note: epi ? PHASE_SHIFT_FORMULA : "one line per excitation: no shift along phase",
    },
  };
}

/**
 * The prediction inputs of a protocol and its built sequence: readout
 * polarity, slice-select gradient of the excitation and, for EPI, the
 * sequence's `effectiveEchoSpacing` (ESP/shots, the one source of that
 * quantity), `phaseLinesEffective` (default the acquired grid's phase lines,
 * matrix × (1 + phase oversampling): Δk_y = 1/FOV_acq) and `phaseBlipSign`
 * (default +1). Shared by report.json, the `protocol` table and checks.
 */
export function fatShiftInput(protocol: Protocol, seq: Sequence, ppm: number = FAT_SINGLE_PPM): FatShiftInput {
  const q = seq.quantities;
  const tau = q.effectiveEchoSpacing;
  return {
    fieldT: protocol.field, ppm, pixelBandwidth: protocol.pixelBandwidth, readSign: protocol.readoutPolarity,
    dxRead: protocol.fov.read / protocol.matrix.read, dyPhase: protocol.fov.phase / protocol.matrix.phase,
    sliceGradient: q.sliceGradient,
    ...(q.refocusGradient ? { refocusGradient: q.refocusGradient } : {}),
    ...(tau !== undefined
      ? { effectiveEchoSpacing: tau, phaseLines: q.phaseLinesEffective ?? seq.kspace.phase, blipSign: q.phaseBlipSign ?? 1, alternatingRead: true }
      : {}),
    axisNames: logicalAxes(protocol).names,
  };
}

/** predictFatShift(fatShiftInput(protocol, seq, ppm)). */
export function predictProtocolFatShift(protocol: Protocol, seq: Sequence, ppm: number = FAT_SINGLE_PPM): FatShiftPrediction {
  return predictFatShift(fatShiftInput(protocol, seq, ppm));
}

/** Measured displacement of the fat object relative to the water object on an image. */
export interface FatShiftMeasurement {
  /** Pixels along read and phase (signed, along the positive logical axes). */
  readPx: number;
  phasePx: number;
  readM: number;
  phaseM: number;
  /** Pixels in the water and fat truth regions. */
  waterPixels: number;
  fatPixels: number;
  /** True when each object's search window holds none of the other object (the measurement is clean). */
  separable: boolean;
  method: string;
}

/**
 * Measures the displacement of fat relative to water on a magnitude image
 * `mag` [phase][read] (nPhase × nRead) against the ground truth on the same
 * grid: `pd` (proton density × volume fraction) and `fatFraction` per pixel.
 * Water region: pd > 0 and fat fraction < 0.5; fat region: fat fraction ≥ 0.5.
 *
 * Each region's displacement is found in two steps:
 *   1. centroid: the magnitude-weighted centroid in a window (the region's
 *      bounding box grown by `margin` pixels, per axis if given so, the
 *      water region's by `waterMargin` (default `margin`): water does not
 *      move by the chemical shift, and a window grown to reach a far-shifted
 *      fat image (EPI) would take that image into the water's fit; edge
 *      pixels counted by the part inside it), re-centred on the result until
 *      it settles, minus the
 *      pd-weighted truth centroid;
 *   2. template fit: the region's truth map (or, better, the band-limited
 *      image of a `fine` truth map: its spectrum cropped to the image's
 *      k-space, so the template has the simulated image's ringing), moved by a sub-pixel shift s
 *      (Fourier shift theorem: spectrum × exp(−i2πk·s)), as magnitude, scaled
 *      by the least-squares factor; s minimizes the squared difference to the
 *      image over the window (Brent's line search along read, then phase,
 *      twice, within ±1.5 px of step 1). This removes the bias of step 1 from
 *      the discretely sampled ringing at edges (up to ±0.2 px, depending on
 *      where an edge falls within a pixel).
 * Pixels of the other region's truth mask are left out of every window.
 * Displacement = fat shift minus water shift, so a common shift (B0 offset)
 * cancels. Returns null when either region is empty.
 */
/** Pixels a search window reaches beyond a region's bounding box: the same along both axes, or per axis. */
export type WindowMargin = number | { read: number; phase: number };

/** Truth maps on a grid `factor` times finer than the image along read and phase (same centre convention). */
export interface FineTruth {
  factor: number;
  pd: ArrayLike<number>;
  fatFraction: ArrayLike<number>;
}

/**
 * Whether truth maps hold both regions {@link measureFatShift} needs: water
 * (pd > 0, fat fraction < 0.5) and fat (pd > 0, fat fraction ≥ 0.5). Where
 * either is empty it returns null, so a caller can skip preparing its inputs.
 */
export function hasWaterAndFat(pd: ArrayLike<number>, fatFraction: ArrayLike<number>): boolean {
  let water = false, fat = false;
  for (let i = 0; i < pd.length; i++) {
    if (!(pd[i]! > 0)) continue;
    if (fatFraction[i]! >= 0.5) fat = true;
    else water = true;
    if (water && fat) return true;
  }
  return false;
}

export function measureFatShift(
  mag: ArrayLike<number>, pd: ArrayLike<number>, fatFraction: ArrayLike<number>,
  nRead: number, nPhase: number, dx: number, dy: number, margin: WindowMargin, fine?: FineTruth, waterMargin: WindowMargin = margin,
): FatShiftMeasurement | null {
  const n = nRead * nPhase;
  const region = new Int8Array(n); // 0 none, 1 water, 2 fat
  for (let i = 0; i < n; i++) if (pd[i]! > 0) region[i] = fatFraction[i]! >= 0.5 ? 2 : 1;
  const W = regionStats(region, pd, 1, nRead, nPhase), F = regionStats(region, pd, 2, nRead, nPhase);
  if (W.count === 0 || F.count === 0) return null;
  const w = regionShift(mag, pd, region, 1, W, nRead, nPhase, waterMargin, fine);
  const f = regionShift(mag, pd, region, 2, F, nRead, nPhase, margin, fine);
  const readPx = f.dx - w.dx, phasePx = f.dy - w.dy;
  return {
    readPx, phasePx, readM: readPx * dx, phaseM: phasePx * dy,
    waterPixels: W.count, fatPixels: F.count, separable: w.clean && f.clean,
    method:
      "per object: shifted truth map (Fourier shift, magnitude, least-squares scale) fitted to the image magnitude in a window " +
      "around the object, started from the magnitude-weighted centroid; fat shift minus water shift",
  };
}

const ITERATIONS = 16;

/** Pixels: the template fit's line searches stop once the minimum is bracketed this closely. */
const SHIFT_TOLERANCE = 1e-3;

/**
 * A minimum of f on [lo, hi] by Brent's method: golden-section steps and
 * parabolic interpolation through the three best points (Brent 1973,
 * "Algorithms for Minimization without Derivatives", chapter 5, procedure
 * localmin), stopped when the bracket around the best point is within
 * `tol` (absolute) plus a relative part at machine precision. About half the
 * evaluations of a golden-section search on the smooth misfits here.
 */
export function brentMinimum(f: (v: number) => number, lo: number, hi: number, tol: number): number {
  const c = (3 - Math.sqrt(5)) / 2, eps = Math.sqrt(Number.EPSILON);
  let a = lo, b = hi;
  let v = a + c * (b - a), w = v, x = v;
  let fx = f(x), fv = fx, fw = fx;
  let d = 0, e = 0;
  for (let iter = 0; iter < 200; iter++) {
    const m = 0.5 * (a + b), tol1 = eps * Math.abs(x) + tol / 3, tol2 = 2 * tol1;
    if (Math.abs(x - m) <= tol2 - 0.5 * (b - a)) break;
    let golden = true;
    if (Math.abs(e) > tol1) {
      // parabola through (v, fv), (w, fw), (x, fx)
      let r = (x - w) * (fx - fv), q = (x - v) * (fx - fw), p = (x - v) * q - (x - w) * r;
      q = 2 * (q - r);
      if (q > 0) p = -p;
      else q = -q;
      r = e;
      e = d;
      if (Math.abs(p) < Math.abs(0.5 * q * r) && p > q * (a - x) && p < q * (b - x)) {
        d = p / q;
        const u = x + d;
        if (u - a < tol2 || b - u < tol2) d = x < m ? tol1 : -tol1;
        golden = false;
      }
    }
    if (golden) {
      e = (x < m ? b : a) - x;
      d = c * e;
    }
    const u = Math.abs(d) >= tol1 ? x + d : x + (d > 0 ? tol1 : -tol1);
    const fu = f(u);
    if (fu <= fx) {
      if (u < x) b = x;
      else a = x;
      v = w; fv = fw; w = x; fw = fx; x = u; fx = fu;
    } else {
      if (u < x) a = u;
      else b = u;
      if (fu <= fw || w === x) {
        v = w; fv = fw; w = u; fw = fu;
      } else if (fu <= fv || v === x || v === w) {
        v = u; fv = fu;
      }
    }
  }
  return x;
}

interface RegionStats { count: number; cx: number; cy: number; x0: number; x1: number; y0: number; y1: number }

function regionStats(region: Int8Array, pd: ArrayLike<number>, r: number, nRead: number, nPhase: number): RegionStats {
  let sw = 0, sx = 0, sy = 0, count = 0, x0 = Infinity, x1 = -Infinity, y0 = Infinity, y1 = -Infinity;
  for (let y = 0; y < nPhase; y++) for (let x = 0; x < nRead; x++) {
    const i = y * nRead + x;
    if (region[i] !== r) continue;
    const w = pd[i]!;
    sw += w; sx += w * x; sy += w * y; count++;
    x0 = Math.min(x0, x); x1 = Math.max(x1, x); y0 = Math.min(y0, y); y1 = Math.max(y1, y);
  }
  return { count, cx: sx / sw, cy: sy / sw, x0, x1, y0, y1 };
}

/** Window weights (fraction of each pixel inside [lo, hi] along read and phase); pixels of region `other` get 0. Returns whether any were left out. */
function windowWeights(out: Float64Array, s: RegionStats, ox: number, oy: number, mx: number, my: number, region: Int8Array, other: number, nRead: number, nPhase: number): boolean {
  out.fill(0);
  const lx = s.x0 - mx + ox, hx = s.x1 + mx + ox, ly = s.y0 - my + oy, hy = s.y1 + my + oy;
  let hit = false;
  for (let y = Math.max(0, Math.floor(ly)); y <= Math.min(nPhase - 1, Math.ceil(hy)); y++) {
    const wy = Math.max(0, Math.min(hy, y + 0.5) - Math.max(ly, y - 0.5));
    if (wy === 0) continue;
    for (let x = Math.max(0, Math.floor(lx)); x <= Math.min(nRead - 1, Math.ceil(hx)); x++) {
      const wx = Math.max(0, Math.min(hx, x + 0.5) - Math.max(lx, x - 0.5));
      if (wx === 0) continue;
      const i = y * nRead + x;
      if (region[i] === other) { hit = true; continue; }
      out[i] = wx * wy;
    }
  }
  return hit;
}

/** Scratch of the fine template's transform, per fine truth (the two regions of one measurement share it). */
const fineScratch = new WeakMap<FineTruth, { re: Float64Array; im: Float64Array }>();

function regionShift(
  mag: ArrayLike<number>, pd: ArrayLike<number>, region: Int8Array, r: number, s: RegionStats,
  nRead: number, nPhase: number, margin: WindowMargin, fine?: FineTruth,
): { dx: number; dy: number; clean: boolean } {
  const n = nRead * nPhase, other = r === 1 ? 2 : 1;
  const mx = typeof margin === "number" ? margin : margin.read, my = typeof margin === "number" ? margin : margin.phase;
  const win = new Float64Array(n);
  // 1. centroid, re-centred
  let ox = 0, oy = 0;
  for (let iter = 0; iter < ITERATIONS; iter++) {
    windowWeights(win, s, ox, oy, mx, my, region, other, nRead, nPhase);
    let sw = 0, sx = 0, sy = 0;
    for (let i = 0; i < n; i++) {
      const w = mag[i]! * win[i]!;
      sw += w; sx += w * (i % nRead); sy += w * Math.floor(i / nRead);
    }
    if (!(sw > 0)) break;
    ox = sx / sw - s.cx;
    oy = sy / sw - s.cy;
  }
  // 2. template fit
  const tre = new Float64Array(n), tim = new Float64Array(n);
  let scratch = fine ? fineScratch.get(fine) : undefined;
  if (fine) {
    // band-limited template: spectrum of the finer truth map cropped to the image's k-space
    const f = fine.factor, fr = f * nRead, fp = f * nPhase, big = fr * fp;
    // the fine grid's arrays are shared by the two regions' calls (allocated once)
    if (!scratch || scratch.re.length !== big) {
      scratch = { re: new Float64Array(big), im: new Float64Array(big) };
      fineScratch.set(fine, scratch);
    }
    const bre = scratch.re, bim = scratch.im;
    bre.fill(0);
    bim.fill(0);
    for (let i = 0; i < big; i++) {
      const v = fine.pd[i]!;
      if (v > 0 && (fine.fatFraction[i]! >= 0.5 ? 2 : 1) === r) bre[i] = v;
    }
    const oR = Math.floor(fr / 2) - Math.floor(nRead / 2), oP = Math.floor(fp / 2) - Math.floor(nPhase / 2);
    // fft2c (read axis, then phase axis), the phase axis only on the read columns kept below:
    // those values are the whole transform's
    if (fr > 1) centredLines(bre, bim, fr, 1, 0, fp, fr, -1, 1);
    if (fp > 1) centredLines(bre, bim, fp, fr, oR, nRead, 1, -1, 1);
    for (let a = 0; a < nPhase; a++) for (let b = 0; b < nRead; b++) {
      tre[a * nRead + b] = bre[(a + oP) * fr + b + oR]!;
      tim[a * nRead + b] = bim[(a + oP) * fr + b + oR]!;
    }
  } else {
    for (let i = 0; i < n; i++) tre[i] = region[i] === r ? pd[i]! : 0;
    fft2c(tre, tim, nPhase, nRead);
  }
  const wr = new Float64Array(n), wi = new Float64Array(n);
  const cR = Math.floor(nRead / 2), cP = Math.floor(nPhase / 2);
  let clean = true;
  // the shift's phase exp(−i2π((b − cR)·sx/nRead + (a − cP)·sy/nPhase)) is a product of a read factor
  // and a phase factor, and each 1D inverse transform commutes with the other axis' factor: a search
  // along read transforms the template along phase once (with the phase factor of its fixed sy) and
  // then, per evaluation, only the window's rows along read; a search along phase the other way round
  const er = new Float64Array(2 * nRead), ep = new Float64Array(2 * nPhase), winIdx = new Int32Array(n);
  const zr = new Float64Array(n), zi = new Float64Array(n);
  const readFactor = (sx: number): void => {
    for (let b = 0; b < nRead; b++) {
      const th = (-2 * Math.PI * (b - cR) * sx) / nRead;
      er[2 * b] = Math.cos(th);
      er[2 * b + 1] = Math.sin(th);
    }
  };
  const phaseFactor = (sy: number): void => {
    for (let a = 0; a < nPhase; a++) {
      const th = (-2 * Math.PI * (a - cP) * sy) / nPhase;
      ep[2 * a] = Math.cos(th);
      ep[2 * a + 1] = Math.sin(th);
    }
  };
  /** z ← s × the read factor er (along read), over rows a0 … a1. */
  const timesRead = (or: Float64Array, oi: Float64Array, sr: Float64Array, si: Float64Array, a0: number, a1: number): void => {
    for (let a = a0; a <= a1; a++) {
      for (let b = 0, i = a * nRead; b < nRead; b++, i++) {
        const c = er[2 * b]!, sn = er[2 * b + 1]!;
        or[i] = sr[i]! * c - si[i]! * sn;
        oi[i] = sr[i]! * sn + si[i]! * c;
      }
    }
  };
  /** z ← s × the phase factor ep (along phase), over columns b0 … b1. */
  const timesPhase = (or: Float64Array, oi: Float64Array, sr: Float64Array, si: Float64Array, b0: number, b1: number): void => {
    for (let a = 0; a < nPhase; a++) {
      const c = ep[2 * a]!, sn = ep[2 * a + 1]!;
      for (let i = a * nRead + b0, end = a * nRead + b1; i <= end; i++) {
        or[i] = sr[i]! * c - si[i]! * sn;
        oi[i] = sr[i]! * sn + si[i]! * c;
      }
    }
  };
  /** Least-squares misfit of the window for the shifted template now in wr, wi (window pixels in index order). */
  const misfit = (): number => {
    let mt = 0, tt = 0, mm = 0;
    for (let k = 0; k < nWin; k++) {
      const i = winIdx[k]!, w = win[i]!;
      const x = wr[i]!, y = wi[i]!, t = Math.sqrt(x * x + y * y), m = mag[i]!;
      mt += w * m * t; tt += w * t * t; mm += w * m * m;
    }
    return tt > 0 ? mm - (mt * mt) / tt : Infinity;
  };
  /** The misfit as a function of sx, sy fixed: z = template × phase factor, inverse transformed along phase (every column). */
  const alongRead = (sy: number): ((sx: number) => number) => {
    phaseFactor(sy);
    timesPhase(zr, zi, tre, tim, 0, nRead - 1);
    if (nPhase > 1) centredLines(zr, zi, nPhase, nRead, 0, nRead, 1, 1, 1 / nPhase);
    return (sx) => {
      readFactor(sx);
      timesRead(wr, wi, zr, zi, ay0, ay1);
      centredLines(wr, wi, nRead, 1, ay0 * nRead, ay1 - ay0 + 1, nRead, 1, 1 / nRead);
      return misfit();
    };
  };
  /** The misfit as a function of sy, sx fixed: z = template × read factor, inverse transformed along read (every row). */
  const alongPhase = (sx: number): ((sy: number) => number) => {
    readFactor(sx);
    timesRead(zr, zi, tre, tim, 0, nPhase - 1);
    centredLines(zr, zi, nRead, 1, 0, nPhase, nRead, 1, 1 / nRead);
    return (sy) => {
      phaseFactor(sy);
      timesPhase(wr, wi, zr, zi, bx0, bx1);
      if (nPhase > 1) centredLines(wr, wi, nPhase, nRead, bx0, bx1 - bx0 + 1, 1, 1, 1 / nPhase);
      return misfit();
    };
  };
  let sx = ox, sy = oy;
  // the window's read columns bx0 … bx1 and phase rows ay0 … ay1
  let bx0 = 0, bx1 = nRead - 1, ay0 = 0, ay1 = nPhase - 1, nWin = 0;
  for (let round = 0; round < 2; round++) {
    if (windowWeights(win, s, sx, sy, mx, my, region, other, nRead, nPhase)) clean = false;
    bx0 = nRead;
    bx1 = -1;
    ay0 = nPhase;
    ay1 = -1;
    nWin = 0;
    for (let i = 0; i < n; i++) {
      if (win[i] === 0) continue;
      winIdx[nWin++] = i;
      const b = i % nRead, a = (i - b) / nRead;
      if (b < bx0) bx0 = b;
      if (b > bx1) bx1 = b;
      if (a < ay0) ay0 = a;
      if (a > ay1) ay1 = a;
    }
    if (nWin === 0) break;
    const x0 = sx, y0 = sy;
    sx = brentMinimum(alongRead(sy), x0 - 1.5, x0 + 1.5, SHIFT_TOLERANCE);
    sy = brentMinimum(alongPhase(sx), y0 - 1.5, y0 + 1.5, SHIFT_TOLERANCE);
  }
  return { dx: sx, dy: sy, clean };
}
