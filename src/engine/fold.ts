/**
 * The time-segmented fold of the readout groups: a fast readout for the
 * sequences the general path plays (spin echo, RARE, bSSFP, RF-spoiled and
 * 3D gradient echo, EPI, multi-slice). Bloch propagation per TR stays the
 * general path's (general.ts); only the readout of each line changes.
 *
 * For one readout with per-dwell factor a_g = P_p·D_g of readout group g
 * (P_p = U·V·W the gradient phase per dwell at the group's position p — the
 * read index iu, or (iu, iv, iw) when the readout gradient has a phase or
 * slice part — and D_g = exp(−Δt·λ_g), λ = R2 + i2πΔf), the direct operator
 * sums s_j = Σ_g h_g·z_g·a_g^j. Time segmentation (Noll, Meyer, Pauly,
 * Nishimura & Macovski 1991, IEEE TMI 10:629) with least-squares
 * interpolators (Sutton, Noll & Fessler 2003, IEEE TMI 22:178) writes
 *
 *   exp(−jΔt·λ) ≈ Σ_l B_l(j)·exp(−t_l·λ),   t_l = l·τ, τ = (ns − 1)Δt/(L − 1),
 *
 * so that
 *
 *   s_j ≈ Σ_l B_l(j) · Σ_p P_p^j · Y_l[p],   Y_l[p] = Σ_{g at p} h_g·z_g·c_g^l,  c_g = exp(−τ·λ_g).
 *
 * The B_l(j) are the least-squares fit over a grid covering the (Δf, R2)
 * range of the isochromats that carry magnetization; L is the smallest that
 * brings the largest error on a twice denser check grid to tolerance/split.
 * Each chunk folds its groups into Y (one exp per group and shape, L complex
 * products per group, readout and coil) and hands Y back instead of k-space;
 * the driver adds the Y partials in the fixed order of sum.ts and then applies
 * the transform Σ_p P_p^j·Y_l[p] once (the readout recurrence over positions).
 * So the result does not depend on the executor or the number of workers.
 *
 * A-posteriori check: a few readouts chosen by a seeded generator also get the
 * direct recurrence inside every chunk (their exact lines are carried at the
 * end of the partial); the fast lines are compared with them after the
 * transform (ESTIMATE_MARGIN × the relative L2 error on those lines). Above
 * the tolerance the caller reruns the direct operator and says so.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { DIRECT_NS_PER_UNIT, ESTIMATE_MARGIN, ESTIMATE_SEED, flooredEstimate, mulberry32, predictReadoutCosts, stratifiedPicks, type ReadoutChoice, type ReadoutCosts, type ReadoutReport } from "./fast.js";
import type { EnginePlan, Op } from "./plan.js";
import type { AdcOp, ReadoutScratch } from "./readout.js";
import { readoutRecurrenceFast } from "./wasm.js";
import { esWidth, nufft1Plan } from "./nufft.js";

const TWO_PI = 2 * Math.PI;

/** Largest number of time segments (beyond it the direct operator runs). */
export const FOLD_MAX_SEGMENTS = 48;
/** Each factor's share of the tolerance: segments are chosen for a largest interpolation error of tolerance/FOLD_SPLIT. */
export const FOLD_SPLIT = 8;
/**
 * Largest partial (Y of one chunk plus the estimate lines) in bytes. Held
 * partials are bounded by the executors' window (2·workers + 4 chunks), so
 * 64 MB keeps them under about 1 GB up to 5 workers. A constant, so the
 * choice does not depend on the number of workers.
 */
export const FOLD_MAX_PARTIAL_BYTES = 64 * 2 ** 20;
/** Readouts checked against the direct recurrence (whole lines). */
export const FOLD_ESTIMATE_LINES = 4;

/** One readout shape (samples, dwell) and its interpolators. */
export interface FoldShape {
  samples: number;
  dwell: number;
  /** Segments L. */
  L: number;
  /** Segment spacing τ (s). */
  tau: number;
  /** B_l(j), interleaved complex, index 2·(j·L + l). */
  B: Float64Array;
  /** Largest interpolation error on the check grid. */
  error: number;
}

/** What the chunks and the driver need to fold (plain data: posted to workers with the plan). */
export interface FoldSpec {
  L: number;
  /** Positions: the read index (full false) or (iu·nv + iv)·nw + iw (full true). */
  positions: number;
  full: boolean;
  nv: number;
  nw: number;
  /** Readouts (ADC ops, in op order). */
  adcs: number;
  /** Shape index of each readout. */
  shapeOf: Int32Array;
  shapes: FoldShape[];
  /** Readouts of the a-posteriori estimate (ascending) and each readout's slot among them (−1: none). */
  estAdcs: Int32Array;
  estSlot: Int32Array;
  /** Y part of the partial: [coil][adc][position][segment] (coils·adcs·positions·L); then coils·estAdcs·read exact samples. */
  yLength: number;
  length: number;
  split: number;
  /**
   * Width of the non-uniform FFT's kernel (nufft.ts) that applies Σ_p P_p^j·Y_l[p]
   * (the positions' per-dwell phases are arbitrary points on the unit circle),
   * or 0: the readout recurrence over positions.
   */
  kernelWidth: number;
}

/** Length of a chunk's partial: Y and the estimate lines with a fold, else k-space [coil][row][read]. */
export function partialLength(plan: EnginePlan): number {
  return plan.fold ? plan.fold.length : plan.coils * plan.rows * plan.read;
}

// ---------------------------------------------------------------------------
// Interpolators

const fitCache = new Map<string, FoldShape | null>();

/**
 * The least-squares interpolators of one readout shape over the (Δf, R2)
 * box [fMin, fMax] × [rMin, rMax]: the smallest L (≤ maxL) whose largest
 * error |exp(−jΔtλ) − Σ_l B_l(j)·exp(−t_lλ)| on the check grid is at most
 * `target`; null when maxL segments do not reach it.
 */
export function fitShape(ns: number, dwell: number, fMin: number, fMax: number, rMin: number, rMax: number, target: number, maxL = FOLD_MAX_SEGMENTS): FoldShape | null {
  const key = `${ns}|${dwell}|${fMin}|${fMax}|${rMin}|${rMax}|${target}|${maxL}`;
  if (fitCache.has(key)) return fitCache.get(key)!;
  const T = Math.max(0, ns - 1) * dwell;
  let res: FoldShape | null;
  if (ns <= 1 || T === 0 || (fMax === fMin && rMax === rMin)) {
    // one λ (or one sample): L = 1 with t_0 = 0 is exact
    const B = new Float64Array(2 * ns);
    const lam = { r: rMin, f: fMin };
    for (let j = 0; j < ns; j++) {
      const t = j * dwell, e = Math.exp(-t * lam.r), th = -TWO_PI * lam.f * t;
      B[2 * j] = e * Math.cos(th);
      B[2 * j + 1] = e * Math.sin(th);
    }
    res = { samples: ns, dwell, L: 1, tau: 0, B, error: 0 };
  } else {
    const tryL = (L: number) => {
      const g = fitGrids(fMin, fMax, rMin, rMax, T, L);
      return fitL(ns, dwell, T, L, g.fit, g.check);
    };
    // smallest L by doubling then bisection (the error falls with L)
    let lo = 1, hi = -1, best: FoldShape | null = null;
    let L = Math.min(maxL, Math.max(2, Math.ceil((fMax - fMin) * T) + 2));
    for (;;) {
      const s = tryL(L);
      if (s && s.error <= target) {
        hi = L;
        best = s;
        break;
      }
      lo = L;
      if (L >= maxL) break;
      L = Math.min(maxL, Math.ceil(L * 1.5));
    }
    if (best) {
      while (hi - lo > 1) {
        const mid = (lo + hi) >> 1;
        const s = tryL(mid);
        if (s && s.error <= target) {
          hi = mid;
          best = s;
        } else lo = mid;
      }
    }
    res = best;
  }
  if (fitCache.size > 64) fitCache.clear();
  fitCache.set(key, res);
  return res;
}

/**
 * Least-squares interpolators for L segments (QR by Gram–Schmidt applied
 * twice), and their largest error on the check grid. A segment whose column
 * is within DEPENDENT (relative) of the span of the earlier ones is left out
 * (its B_l = 0): it adds nothing the others cannot, and keeping it would only
 * make the B large (cancellation).
 */
const DEPENDENT = 1e-9;
export function fitL(ns: number, dwell: number, T: number, L: number, fit: { f: number[]; r: number[] }, check: { f: number[]; r: number[] }): FoldShape | null {
  const tau = T / (L - 1), N = fit.f.length;
  // columns C_l(λ_n) = exp(−l·τ·λ_n), Q overwrites them (N × L, column-major, interleaved)
  const Q = new Float64Array(2 * N * L), R = new Float64Array(2 * L * L);
  for (let n = 0; n < N; n++) {
    for (let l = 0; l < L; l++) {
      const t = l * tau, e = Math.exp(-t * fit.r[n]!), th = -TWO_PI * fit.f[n]! * t, o = 2 * (l * N + n);
      Q[o] = e * Math.cos(th);
      Q[o + 1] = e * Math.sin(th);
    }
  }
  // act: the segments kept, in order; R[k][k'] over kept positions k, k'
  const act: number[] = [];
  for (let l = 0; l < L; l++) {
    const ql = 2 * l * N;
    let n0 = 0;
    for (let n = 0; n < 2 * N; n++) n0 += Q[ql + n]! ** 2;
    n0 = Math.sqrt(n0);
    const K = act.length;
    for (let pass = 0; pass < 2; pass++) {
      for (let k = 0; k < K; k++) {
        const qk = 2 * act[k]! * N;
        let pr = 0, pi = 0;
        for (let n = 0; n < N; n++) {
          const ar = Q[qk + 2 * n]!, ai = Q[qk + 2 * n + 1]!, br = Q[ql + 2 * n]!, bi = Q[ql + 2 * n + 1]!;
          pr += ar * br + ai * bi;
          pi += ar * bi - ai * br;
        }
        for (let n = 0; n < N; n++) {
          const ar = Q[qk + 2 * n]!, ai = Q[qk + 2 * n + 1]!;
          Q[ql + 2 * n] = Q[ql + 2 * n]! - (ar * pr - ai * pi);
          Q[ql + 2 * n + 1] = Q[ql + 2 * n + 1]! - (ar * pi + ai * pr);
        }
        R[2 * (k * L + K)] = R[2 * (k * L + K)]! + pr;
        R[2 * (k * L + K) + 1] = R[2 * (k * L + K) + 1]! + pi;
      }
    }
    let nn = 0;
    for (let n = 0; n < 2 * N; n++) nn += Q[ql + n]! ** 2;
    nn = Math.sqrt(nn);
    if (!(nn > DEPENDENT * n0)) {
      for (let k = 0; k < K; k++) R[2 * (k * L + K)] = R[2 * (k * L + K) + 1] = 0;
      continue;
    }
    for (let n = 0; n < 2 * N; n++) Q[ql + n] = Q[ql + n]! / nn;
    R[2 * (K * L + K)] = nn;
    act.push(l);
  }
  const K = act.length;
  if (K === 0) return null;
  // B(j) = R⁻¹·Qᴴ·e_j over the kept segments, e_j(λ_n) = exp(−jΔt·λ_n)
  const B = new Float64Array(2 * ns * L), y = new Float64Array(2 * K), x = new Float64Array(2 * K);
  for (let j = 0; j < ns; j++) {
    const t = j * dwell;
    y.fill(0);
    for (let n = 0; n < N; n++) {
      const e = Math.exp(-t * fit.r[n]!), th = -TWO_PI * fit.f[n]! * t, er = e * Math.cos(th), ei = e * Math.sin(th);
      for (let k = 0; k < K; k++) {
        const o = 2 * (act[k]! * N + n), qr = Q[o]!, qi = Q[o + 1]!;
        y[2 * k] = y[2 * k]! + (qr * er + qi * ei);
        y[2 * k + 1] = y[2 * k + 1]! + (qr * ei - qi * er);
      }
    }
    for (let k = K - 1; k >= 0; k--) {
      let xr = y[2 * k]!, xi = y[2 * k + 1]!;
      for (let m = k + 1; m < K; m++) {
        const rr = R[2 * (k * L + m)]!, ri = R[2 * (k * L + m) + 1]!, br = x[2 * m]!, bi = x[2 * m + 1]!;
        xr -= rr * br - ri * bi;
        xi -= rr * bi + ri * br;
      }
      const d = R[2 * (k * L + k)]!;
      x[2 * k] = xr / d;
      x[2 * k + 1] = xi / d;
      B[2 * (j * L + act[k]!)] = x[2 * k]!;
      B[2 * (j * L + act[k]!) + 1] = x[2 * k + 1]!;
    }
  }
  // largest error on the check grid, C_l computed as the chunks do (c^l by repeated products)
  let err = 0;
  const Cr = new Float64Array(L), Ci = new Float64Array(L);
  for (let n = 0; n < check.f.length; n++) {
    const r2 = check.r[n]!, f = check.f[n]!;
    const e = Math.exp(-tau * r2), th = -TWO_PI * f * tau, cr = e * Math.cos(th), ci = e * Math.sin(th);
    let wr = 1, wi = 0;
    for (let l = 0; l < L; l++) {
      Cr[l] = wr;
      Ci[l] = wi;
      const t = wr * cr - wi * ci;
      wi = wr * ci + wi * cr;
      wr = t;
    }
    for (let j = 0; j < ns; j++) {
      const t = j * dwell, ee = Math.exp(-t * r2), ph = -TWO_PI * f * t;
      let sr = 0, si = 0;
      for (let l = 0; l < L; l++) {
        const br = B[2 * (j * L + l)]!, bi = B[2 * (j * L + l) + 1]!;
        sr += br * Cr[l]! - bi * Ci[l]!;
        si += br * Ci[l]! + bi * Cr[l]!;
      }
      const d = Math.hypot(sr - ee * Math.cos(ph), si - ee * Math.sin(ph));
      if (!(d <= err)) err = d;
    }
  }
  return { samples: ns, dwell, L, tau, B, error: err };
}

// ---------------------------------------------------------------------------
// The chunk side

/** Per-chunk cache of each readout group's c_g = exp(−τλ_g) and position. */
export class FoldScratch {
  cr = new Float64Array(0); ci = new Float64Array(0); pos = new Int32Array(0);
  key = "";
}

/**
 * Folds one readout's live groups into Y (in place of adcOutput): scales the
 * group sums by h_g, adds h_g·z_g·c_g^l into Y[coil][adc][position][l], and
 * for an estimate readout adds its direct line (the recurrence, as adcOutput)
 * into the estimate part of the partial.
 */
export function foldOutput(
  plan: EnginePlan, iso: IsochromatSet, i0: number, adc: AdcOp, a: number, groups: number, live: number,
  outRe: Float64Array, outIm: Float64Array, r: ReadoutScratch, fs: FoldScratch,
): void {
  const f = plan.fold!, L = f.L, P = f.positions, NA = f.adcs, coils = plan.coils;
  const shapeIndex = f.shapeOf[a]!, shape = f.shapes[shapeIndex]!;
  const { zr, zi, h, groupFirst, liveOf } = r;
  // c_g and the position of each group: once per chunk, grouping and shape
  const key = `${i0}|${adc.groupByPhaseAndSlice}|${shapeIndex}|${groups}`;
  if (fs.key !== key) {
    fs.key = key;
    if (fs.cr.length < groups) {
      fs.cr = new Float64Array(plan.maxChunk);
      fs.ci = new Float64Array(plan.maxChunk);
      fs.pos = new Int32Array(plan.maxChunk);
    }
    const { r2, df, iu, iv, iw } = iso, tau = shape.tau;
    for (let g = 0; g < groups; g++) {
      const i = i0 + groupFirst[g]!;
      const e = Math.exp(-tau * r2[i]!), th = -TWO_PI * df[i]! * tau;
      fs.cr[g] = e * Math.cos(th);
      fs.ci[g] = e * Math.sin(th);
      fs.pos[g] = f.full ? (iu[i]! * f.nv + iv[i]!) * f.nw + iw[i]! : iu[i]!;
    }
  }
  const { cr, ci, pos } = fs;
  for (let q = 0; q < coils; q++) {
    const zo = q * live, yo = (q * NA + a) * L * P;
    // by group (the live set may differ between readouts: the receiver filter sees the read gradient's sign)
    for (let g = 0; g < groups; g++) {
      const k = liveOf[g]!;
      if (k < 0) continue;
      let wr = zr[zo + k]! * h[k]!, wi = zi[zo + k]! * h[k]!;
      zr[zo + k] = wr;
      zi[zo + k] = wi;
      const c_r = cr[g]!, c_i = ci[g]!;
      let o = yo + pos[g]! * L;
      for (let l = 0; l < L; l++, o++) {
        outRe[o] = outRe[o]! + wr;
        outIm[o] = outIm[o]! + wi;
        const t = wr * c_r - wi * c_i;
        wi = wr * c_i + wi * c_r;
        wr = t;
      }
    }
  }
  const slot = f.estSlot[a]!;
  if (slot < 0) return;
  // the direct line of this readout (exactly as adcOutput, into the estimate part)
  const { ar, ai, sr, si } = r, E = f.estAdcs.length;
  for (let q = 0; q < coils; q++) {
    const zo = q * live;
    sr.fill(0, 0, adc.samples);
    si.fill(0, 0, adc.samples);
    readoutRecurrenceFast(sr, si, adc.samples, q === 0 ? zr : zr.subarray(zo), q === 0 ? zi : zi.subarray(zo), ar, ai, live, plan.wasm);
    const base = f.yLength + (q * E + slot) * plan.read;
    for (let j = 0; j < adc.samples; j++) {
      const x = sr[j]!, y = si[j]!;
      outRe[base + j] = outRe[base + j]! + (x * adc.weightRe - y * adc.weightIm);
      outIm[base + j] = outIm[base + j]! + (x * adc.weightIm + y * adc.weightRe);
    }
  }
}

// ---------------------------------------------------------------------------
// The driver side

/** The ADC ops of a plan, in op order. */
function adcOps(ops: Op[]): AdcOp[] {
  return ops.filter((o): o is AdcOp => o.kind === "adc");
}

/**
 * The transform after all partials are summed: k-space [coil][row][read] from
 * Y, and the a-posteriori estimate against the exact estimate lines (at
 * least its floor, a share of `tolerance`: flooredEstimate).
 */
export function foldFinish(
  plan: EnginePlan, yRe: Float64Array, yIm: Float64Array, iso: { uGrid: Float64Array; vGrid: Float64Array; wGrid: Float64Array }, tolerance: number,
): { re: Float64Array; im: Float64Array; estimate: { samples: number; seed: number; relL2: number; floor: number; measured: number } } {
  const f = plan.fold!, L = f.L, P = f.positions, NA = f.adcs, coils = plan.coils, E = f.estAdcs.length;
  const re = new Float64Array(coils * plan.rows * plan.read), im = new Float64Array(re.length);
  const adcs = adcOps(plan.ops), tab = plan.tab;
  const pr = new Float64Array(P), pi = new Float64Array(P);
  const gr = new Float64Array(P), gi = new Float64Array(P), yr = new Float64Array(P), yi = new Float64Array(P);
  const ns = plan.read;
  const xr = new Float64Array(ns), xi = new Float64Array(ns), sr = new Float64Array(ns), si = new Float64Array(ns), xs = new Float64Array(P), used = new Int32Array(P);
  let num = 0, den = 0, samples = 0;
  for (let a = 0; a < NA; a++) {
    const adc = adcs[a]!, shape = f.shapes[f.shapeOf[a]!]!, n = adc.samples, B = shape.B;
    // P_p = U·V·W of one dwell at each position
    for (let p = 0; p < P; p++) {
      const iu = f.full ? Math.floor(p / (f.nv * f.nw)) : p, iv = f.full ? Math.floor(p / f.nw) % f.nv : 0, iw = f.full ? p % f.nw : 0;
      const ou = adc.dwellReadTable + 2 * iu;
      let ar = tab[ou]!, ai = tab[ou + 1]!;
      if (f.full) {
        const ov = adc.dwellPhaseTable + 2 * iv, ow = adc.dwellSliceTable + 2 * iw;
        const vr = tab[ov]!, vi = tab[ov + 1]!, wr = tab[ow]!, wi = tab[ow + 1]!;
        const uvr = ar * vr - ai * vi, uvi = ar * vi + ai * vr;
        ar = uvr * wr - uvi * wi;
        ai = uvr * wi + uvi * wr;
      }
      pr[p] = ar;
      pi[p] = ai;
    }
    const slot = f.estSlot[a]!;
    // the non-uniform FFT where the spec asks for it and every P_p is a pure phase
    let nu = f.kernelWidth > 0 ? nufft1Plan(n, f.kernelWidth) : null;
    for (let p = 0; p < P && nu; p++) if (Math.abs(pr[p]! * pr[p]! + pi[p]! * pi[p]! - 1) > 1e-12) nu = null;
    // its points, set once per readout: the positions holding something in any coil and segment,
    // x_p with P_p = exp(−i2π·x_p) (the kernel values are then reused by every coil and segment)
    let mu = 0;
    if (nu) {
      for (let p = 0; p < P; p++) {
        let any = false;
        for (let q = 0; q < coils && !any; q++) {
          const yo = ((q * NA + a) * P + p) * L;
          for (let l = 0; l < L && !any; l++) any = yRe[yo + l] !== 0 || yIm[yo + l] !== 0;
        }
        if (!any) continue;
        used[mu] = p;
        xs[mu++] = -Math.atan2(pi[p]!, pr[p]!) / TWO_PI;
      }
      nu.setPoints(xs, mu);
    }
    for (let q = 0; q < coils; q++) {
      sr.fill(0, 0, n);
      si.fill(0, 0, n);
      const yo = (q * NA + a) * L * P;
      for (let l = 0; l < L; l++) {
        if (nu) {
          // the same sum by the non-uniform FFT over the readout's points (a zero strength adds nothing)
          if (mu === 0) continue;
          for (let k = 0; k < mu; k++) {
            yr[k] = yRe[yo + used[k]! * L + l]!;
            yi[k] = yIm[yo + used[k]! * L + l]!;
          }
          nu.transform(yr, yi, xr, xi);
          addSegment(sr, si, xr, xi, B, L, l, n);
          continue;
        }
        // positions holding something, gathered
        let m = 0;
        for (let p = 0; p < P; p++) {
          const vr = yRe[yo + p * L + l]!, vi = yIm[yo + p * L + l]!;
          if (vr === 0 && vi === 0) continue;
          yr[m] = vr;
          yi[m] = vi;
          gr[m] = pr[p]!;
          gi[m] = pi[p]!;
          m++;
        }
        if (m === 0) continue;
        xr.fill(0, 0, n);
        xi.fill(0, 0, n);
        readoutRecurrenceFast(xr, xi, n, yr, yi, gr, gi, m, plan.wasm);
        addSegment(sr, si, xr, xi, B, L, l, n);
      }
      const base = (q * plan.rows + adc.row) * plan.read;
      for (let j = 0; j < n; j++) {
        const x = sr[j]!, y = si[j]!;
        const vr = x * adc.weightRe - y * adc.weightIm, vi = x * adc.weightIm + y * adc.weightRe;
        re[base + j] = re[base + j]! + vr;
        im[base + j] = im[base + j]! + vi;
        if (slot >= 0) {
          const eo = f.yLength + (q * E + slot) * plan.read + j;
          const dr = yRe[eo]!, di = yIm[eo]!;
          num += (vr - dr) ** 2 + (vi - di) ** 2;
          den += dr * dr + di * di;
          samples++;
        }
      }
    }
  }
  // no −0 (as the spoiled fast operator's k-space)
  for (let k = 0; k < re.length; k++) {
    re[k] = re[k]! + 0;
    im[k] = im[k]! + 0;
  }
  return { re, im, estimate: flooredEstimate({ samples, seed: ESTIMATE_SEED, relL2: den > 0 ? ESTIMATE_MARGIN * Math.sqrt(num / den) : 0 }, tolerance) };
}

/** s[j] += B_l(j)·x[j] for the n samples (one segment's share of a readout). */
function addSegment(sr: Float64Array, si: Float64Array, xr: Float64Array, xi: Float64Array, B: Float64Array, L: number, l: number, n: number): void {
  for (let j = 0; j < n; j++) {
    const br = B[2 * (j * L + l)]!, bi = B[2 * (j * L + l) + 1]!;
    sr[j] = sr[j]! + (br * xr[j]! - bi * xi[j]!);
    si[j] = si[j]! + (br * xi[j]! + bi * xr[j]!);
  }
}

// ---------------------------------------------------------------------------
// Choosing the fold

/**
 * Cost weights of the fold in steps of the readout recurrence (one complex
 * multiply-add per group and sample on the WebAssembly SIMD kernel, the
 * direct operator's unit): per group and readout (filter weight, scaling,
 * cached c_g and position), per group, readout, segment and coil (one complex
 * product and add into Y), per element of a partial (allocating, transferring
 * and adding it in the fixed order), and per isochromat and op of the general
 * path where the fold replaces the ideally spoiled shortcut. Measured
 * 2026-12-02 on this shared 2-core machine (Node 20): the recurrence 0.58 ns
 * per step, the fold's segment loop 2.2 ns per step (3.8 steps; 32768 groups,
 * 128 samples, 12 segments, in-process after warm-up); a 64² spin echo with
 * B0 varying through the slice (groups = isochromats): direct 9.7 s, fold
 * 7.3–9.0 s at 10–21 segments, as these weights predict within the noise.
 */
const W_FOLD = { group: 5, segment: 4, partial: 3 };
/**
 * Cost weights of the non-uniform FFT over positions (same unit): per point
 * and readout (its phase, kernel values: one exp per grid point), per point,
 * segment and coil (spreading, per grid point) and per FFT point and level.
 */
const W_NUFFT = { point: 20, kernel: 10, fft: 3 };

/** The fold's decision and, when it runs, its spec; with the report of what was decided. */
export interface FoldChoice {
  spec: FoldSpec | null;
  report: ReadoutReport;
}

export interface FoldOptions {
  readout?: ReadoutChoice;
  tolerance?: number;
  general?: boolean;
  blocks?: [number, number];
  onBlock?: unknown;
}

/**
 * Whether the fold runs for this plan, and its spec. `direct` is the report
 * the ideally spoiled operator's attempt left (direct, with why); the fold is
 * considered wherever that operator did not run, with readout "fast"
 * (whenever it applies) or "auto" (where predicted cheaper than the direct
 * readout; else `direct` is kept, with the fold's prediction added). An
 * ideally spoiled plan then plays the general path (chunk.ts).
 */
export function chooseFold(seq: Sequence, iso: IsochromatSet, plan: EnginePlan, opts: FoldOptions, direct: ReadoutReport, tolerance: number): FoldChoice {
  const requested = opts.readout ?? "auto";
  const keep = (fallback?: string): FoldChoice => ({ spec: null, report: requested === "fast" && fallback ? { ...direct, fallback } : direct });
  if (requested === "direct" || opts.general) return { spec: null, report: direct };
  // (a sharded run folds every chunk and block 0 carries the finished k-space: executor.ts wholeKspace)
  if (opts.onBlock && !opts.blocks) return keep("block sums were asked for (onBlock): the time-segmented fold's chunk partials are not k-space");
  const adcs = adcOps(plan.ops), NA = adcs.length;
  if (NA === 0) return keep("no readout");
  // (Δf, R2) range of the isochromats carrying magnetization
  const { m0, df, r2 } = iso;
  let fMin = Infinity, fMax = -Infinity, rMin = Infinity, rMax = -Infinity;
  for (let i = 0; i < iso.count; i++) {
    if (m0[i] === 0) continue;
    const f = df[i]!, r = r2[i]!;
    if (f < fMin) fMin = f;
    if (f > fMax) fMax = f;
    if (r < rMin) rMin = r;
    if (r > rMax) rMax = r;
  }
  if (!(fMin <= fMax)) return keep("no isochromat carries magnetization");
  const split = FOLD_SPLIT, target = tolerance / split;
  const shapeKeys = new Map<string, number>(), shapes: FoldShape[] = [], shapeOf = new Int32Array(NA);
  let L = 1;
  const spec0: { samples: number; dwell: number }[] = [];
  for (let a = 0; a < NA; a++) {
    const o = adcs[a]!, dwell = plan.durations[o.dwellDurationIndex]!, k = `${o.samples}|${dwell}`;
    let s = shapeKeys.get(k);
    if (s === undefined) {
      s = spec0.length;
      shapeKeys.set(k, s);
      spec0.push({ samples: o.samples, dwell });
    }
    shapeOf[a] = s;
  }
  // one L for all shapes: the largest any needs (a shape that alone needs fewer is refitted at L)
  const fits: FoldShape[] = [];
  for (const s of spec0) {
    const fit = fitShape(s.samples, s.dwell, fMin, fMax, rMin, rMax, target);
    if (!fit) return keep(`the (Δf, R2) range of the isochromats (${fMin.toFixed(1)} … ${fMax.toFixed(1)} Hz, ${rMin.toFixed(1)} … ${rMax.toFixed(1)} /s) needs more than ${FOLD_MAX_SEGMENTS} time segments over a readout for the tolerance`);
    fits.push(fit);
    L = Math.max(L, fit.L);
  }
  for (const fit of fits) {
    const at = fit.L === L ? fit : forceL(fit.samples, fit.dwell, fMin, fMax, rMin, rMax, L);
    if (!at) return keep("the interpolators could not be fitted at a common number of segments");
    shapes.push(at);
  }
  const full = adcs.some((o) => o.groupByPhaseAndSlice);
  const nu = iso.uGrid.length, nv = iso.vGrid.length, nw = iso.wGrid.length;
  const positions = full ? nu * nv * nw : nu;
  const E = Math.min(FOLD_ESTIMATE_LINES, NA);
  const yLength = plan.coils * NA * L * positions, length = yLength + plan.coils * E * plan.read;
  if (16 * length > FOLD_MAX_PARTIAL_BYTES) {
    return keep(`the fold's partial per chunk (${plan.coils} coils × ${NA} readouts × ${L} segments × ${positions} positions) would take ${(16 * length / 2 ** 20).toFixed(0)} MB, above ${FOLD_MAX_PARTIAL_BYTES / 2 ** 20} MB`);
  }
  // the estimate's readouts: seeded, distinct, stratified by the distance of their k-space row from the middle
  // row (the centre of k-space in the centred layout), so that lines near the centre, which carry most of the
  // signal, are among them
  const rnd = mulberry32(ESTIMATE_SEED), mid = Math.floor(plan.rows / 2);
  const picked = stratifiedPicks(Array.from({ length: NA }, (_, a) => a), E, (a) => Math.abs(adcs[a]!.row - mid), rnd);
  const estAdcs = Int32Array.from(picked.sort((x, y) => x - y)), estSlot = new Int32Array(NA).fill(-1);
  estAdcs.forEach((a, k) => (estSlot[a] = k));
  // the transform over positions: the non-uniform FFT (kernel width from this factor's share of the tolerance) where it costs less
  let nsSum = 0;
  for (const o of adcs) nsSum += o.samples;
  const kw = esWidth(target);
  const transformUnits = (width: number) => {
    if (width === 0) return plan.coils * L * positions * nsSum;
    let u = 0;
    for (const o of adcs) {
      let M = 2;
      while (M < 2 * o.samples || M < 2 * width) M *= 2;
      u += positions * (W_NUFFT.point + W_NUFFT.kernel * width) + plan.coils * L * (positions * width + W_NUFFT.fft * M * Math.log2(M) + o.samples);
    }
    return u;
  };
  const kernelWidth = transformUnits(kw) < transformUnits(0) ? kw : 0;
  const spec: FoldSpec = { L, positions, full, nv, nw, adcs: NA, shapeOf, shapes, estAdcs, estSlot, yLength, length, split, kernelWidth };
  const report: ReadoutReport = {
    operator: "fast", requested, tolerance,
    method: "time-segmented fold of the readout groups",
    segments: L, split, kernelWidth: kernelWidth || null,
    fold: { dfHz: [fMin, fMax], r2PerS: [rMin, rMax], positions, partialBytes: 16 * length, estimateLines: E },
  };
  if (requested === "fast") return { spec, report };
  // auto: predicted cost against the direct readout (both in recurrence steps; Bloch propagation is common to both)
  const base = predictReadoutCosts(seq, plan, iso, tolerance);
  const groups = base.groups, coils = plan.coils;
  const directUnits = groups * nsSum * coils;
  // (Bloch propagation is the chunk runner's either way: the fold keeps the class-state shortcut where the plan
  // has it, runChunkSpoiled handing its group sums to foldOutput)
  const foldUnits = NA * groups * (W_FOLD.group + W_FOLD.segment * L * coils) + (E / NA) * groups * nsSum * coils
    + transformUnits(kernelWidth) + W_FOLD.partial * plan.chunks * length;
  const predicted: ReadoutCosts = {
    directMs: (directUnits * DIRECT_NS_PER_UNIT) / 1e6, fastMs: (foldUnits * DIRECT_NS_PER_UNIT) / 1e6, directUnits, fastUnits: foldUnits,
    segmentsBound: L, groups, slots: base.slots,
    model: "readout only (Bloch propagation is common to both): direct = readout groups × samples × coils; fold = groups × readouts × (group + segments × coils) + the estimate lines + the transform over positions (segments × coils × (positions × kernel width + FFT) with the non-uniform FFT, else segments × positions × samples × coils) + chunks × partial length (engine/fold.ts)",
  };
  if (foldUnits >= directUnits) {
    // auto: the direct readout runs because the fold was predicted slower, whatever the spoiled operator's attempt said
    const why = `the time-segmented fold was predicted slower than the direct readout (readout alone: fold ${predicted.fastMs!.toFixed(0)} ms, direct ${predicted.directMs.toFixed(0)} ms)`;
    // (a fallback names why a fast operator did not run where one was tried; a plain auto choice has none)
    return { spec: null, report: { ...direct, choice: "direct", ...(direct.fallback ? { fallback: `${direct.fallback}; ${why}` } : {}), foldPredicted: predicted } };
  }
  return { spec, report: { ...report, choice: "fast", predicted } };
}

/** Interpolators at exactly L ≥ 2 segments (a shape that alone needs fewer, when readouts of different shapes share one L). */
function forceL(ns: number, dwell: number, fMin: number, fMax: number, rMin: number, rMax: number, L: number): FoldShape | null {
  const T = Math.max(0, ns - 1) * dwell;
  if (T === 0 || (fMax === fMin && rMax === rMin)) {
    // one sample (t_0 = 0 holds it exactly) or one λ (B_0 as at L = 1, the other segments unused)
    const one = fitShape(ns, dwell, fMin, fMax, rMin, rMax, Infinity);
    if (!one) return null;
    const B = new Float64Array(2 * ns * L);
    for (let j = 0; j < ns; j++) {
      B[2 * j * L] = one.B[2 * j]!;
      B[2 * j * L + 1] = one.B[2 * j + 1]!;
    }
    return { samples: ns, dwell, L, tau: 0, B, error: one.error };
  }
  const g = fitGrids(fMin, fMax, rMin, rMax, T, L);
  return fitL(ns, dwell, T, L, g.fit, g.check);
}

/**
 * The least-squares fit grid over the (Δf, R2) box and the check grid (the
 * fit grid and its midpoints): Δf step ≤ 1/(8T), R2 step ≤ 1/(4T) over the
 * readout duration T, and at least 2L + 1 points in all (so the fit is
 * overdetermined however narrow the box).
 */
function fitGrids(fMin: number, fMax: number, rMin: number, rMax: number, T: number, L: number) {
  let nr = rMax > rMin ? Math.max(Math.ceil((rMax - rMin) * T * 4) + 2, 3) : 1;
  const nf = fMax > fMin ? Math.max(Math.ceil((fMax - fMin) * T * 8) + 1, Math.ceil((2 * L + 1) / nr)) : 1;
  if (nf === 1 && nr > 1) nr = Math.max(nr, 2 * L + 1);
  const grid = (n: number, m: number) => {
    const f: number[] = [], r: number[] = [];
    for (let a = 0; a < n; a++) {
      for (let b = 0; b < m; b++) {
        f.push(n > 1 ? fMin + ((fMax - fMin) * a) / (n - 1) : fMin);
        r.push(m > 1 ? rMin + ((rMax - rMin) * b) / (m - 1) : rMin);
      }
    }
    return { f, r };
  };
  return { fit: grid(nf, nr), check: grid(nf > 1 ? 2 * nf - 1 : 1, nr > 1 ? 2 * nr - 1 : 1) };
}

/** The report of the direct rerun after the fold's estimate exceeded the tolerance. */
export function foldRejected(fold: ReadoutReport, relL2: number, tolerance: number): ReadoutReport {
  const { requested, choice, predicted } = fold;
  return {
    operator: "direct", requested, tolerance, ...(choice ? { choice, predicted } : {}),
    fallback: `the time-segmented fold's a-posteriori error estimate ${relL2.toExponential(2)} exceeded the tolerance ${tolerance}: the direct operator ran again`,
  };
}
