/**
 * Plays the plan's ops over one chunk of isochromats and accumulates the
 * chunk's k-space. Pure function of (plan, isochromats, chunk index): the same
 * chunk gives the same bits on any thread.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import { applyFree, applyRf, applySpoil, readoutRecurrence } from "./kernels.js";
import type { EnginePlan } from "./plan.js";

/**
 * Receiver anti-alias filter response at frequency f (Hz) for a sampled
 * bandwidth bw (Hz): flat to |f| = 0.42·bw, raised-cosine roll-off to zero at
 * the Nyquist edge |f| = 0.5·bw, zero beyond; so nothing from outside the
 * sampled FOV folds back. (A model of a steep digital receiver filter, not of
 * any one scanner.)
 */
export function receiverFilter(f: number, bw: number): number {
  const x = Math.abs(f) / bw;
  if (x <= 0.42) return 1;
  if (x >= 0.5) return 0;
  return 0.5 * (1 + Math.cos((Math.PI * (x - 0.42)) / 0.08));
}

/** Per-chunk scratch, sized for the plan's largest chunk; reused across chunks. */
export class ChunkScratch {
  mr: Float64Array; mi: Float64Array; mz: Float64Array;
  d: Float64Array[]; e1: Float64Array[];
  zr: Float64Array; zi: Float64Array; ar: Float64Array; ai: Float64Array; h: Float64Array;
  /** Per-coil group sums when there are several coils: [coil][group]. */
  czr: Float64Array; czi: Float64Array;
  groupStart: Int32Array;
  sr: Float64Array; si: Float64Array;
  constructor(plan: EnginePlan) {
    const n = plan.maxChunk;
    this.mr = new Float64Array(n); this.mi = new Float64Array(n); this.mz = new Float64Array(n);
    this.d = []; this.e1 = [];
    for (let k = 0; k < plan.durations.length; k++) {
      this.d.push(new Float64Array(2 * n));
      this.e1.push(new Float64Array(n));
    }
    this.zr = new Float64Array(n); this.zi = new Float64Array(n);
    this.ar = new Float64Array(n); this.ai = new Float64Array(n); this.h = new Float64Array(n);
    this.groupStart = new Int32Array(n + 1);
    this.czr = new Float64Array(plan.sens ? plan.coils * n : 0);
    this.czi = new Float64Array(plan.sens ? plan.coils * n : 0);
    this.sr = new Float64Array(plan.read); this.si = new Float64Array(plan.read);
  }
}

/** Runs chunk `c`; adds its signal into outRe/outIm ([coil][row][read], row-major). */
export function runChunk(plan: EnginePlan, iso: IsochromatSet, c: number, outRe: Float64Array, outIm: Float64Array, s: ChunkScratch): void {
  const i0 = plan.chunkStart[c]!, i1 = plan.chunkStart[c + 1]!, n = i1 - i0;
  const { mr, mi, mz, zr, zi, ar, ai, h, sr, si, groupStart } = s;
  const { m0, r1, r2, df, iu, iv, iw } = iso;
  for (let k = 0; k < n; k++) {
    mr[k] = 0; mi[k] = 0; mz[k] = m0[i0 + k]!;
  }
  // Relaxation and off-resonance factors per distinct duration: D = exp(−t/T2)·exp(−i2πΔf·t), E1 = exp(−t/T1).
  for (let q = 0; q < plan.durations.length; q++) {
    const t = plan.durations[q]!, d = s.d[q]!, e1 = s.e1[q]!;
    for (let k = 0; k < n; k++) {
      const i = i0 + k;
      const e2 = Math.exp(-t * r2[i]!), th = -2 * Math.PI * df[i]! * t;
      d[2 * k] = e2 * Math.cos(th);
      d[2 * k + 1] = e2 * Math.sin(th);
      e1[k] = Math.exp(-t * r1[i]!);
    }
  }
  // Readout groups: runs of isochromats with identical per-sample factors
  // (same in-plane position, Δf and T2; and w when the readout gradient has a
  // slice or phase part) are summed before the recurrence. Exact.
  let groups = 0;
  let groupsByW = -1;
  const makeGroups = (byW: boolean) => {
    groups = 0;
    for (let k = 0; k < n; k++) {
      const i = i0 + k;
      if (k === 0 || iu[i] !== iu[i - 1] || iv[i] !== iv[i - 1] || df[i] !== df[i - 1] || r2[i] !== r2[i - 1] || (byW && iw[i] !== iw[i - 1])) {
        groupStart[groups++] = k;
      }
    }
    groupStart[groups] = n;
    groupsByW = byW ? 1 : 0;
  };
  const tab = plan.tab, rfClass = plan.rfClass, maps = plan.rfMaps;
  for (const op of plan.ops) {
    switch (op.t) {
      case "rf":
        applyRf(mr, mi, mz, m0, rfClass, i0, i1, maps, op.base, op.cos, op.sin);
        break;
      case "free":
        applyFree(mr, mi, mz, m0, iu, iv, iw, i0, i1, tab, op.u, op.v, op.w, s.d[op.dur]!, s.e1[op.dur]!);
        break;
      case "spoil":
        applySpoil(mr, mi, n);
        break;
      case "adc": {
        if (groupsByW !== (op.byW ? 1 : 0)) makeGroups(op.byW);
        const dstep = s.d[op.stepDur]!;
        const sens = plan.sens, coils = plan.coils, count = iso.count;
        for (let g = 0; g < groups; g++) {
          const k0 = groupStart[g]!, k1 = groupStart[g + 1]!, i = i0 + k0;
          const w = plan.receiverFilter ? receiverFilter(op.fRead * iso.uGrid[iu[i]!]! + df[i]!, op.bwSampled) : 1;
          h[g] = w;
          if (sens === null) {
            let xr = 0, xi = 0;
            for (let k = k0; k < k1; k++) {
              xr += mr[k]!;
              xi += mi[k]!;
            }
            zr[g] = xr * w;
            zi[g] = xi * w;
          } else {
            // Each coil sees Σ M·S(r) over the group: exact, the readout factor is shared.
            for (let q = 0; q < coils; q++) {
              let xr = 0, xi = 0;
              const so = 2 * q * count;
              for (let k = k0; k < k1; k++) {
                const sr0 = sens[so + 2 * (i0 + k)]!, si0 = sens[so + 2 * (i0 + k) + 1]!;
                xr += mr[k]! * sr0 - mi[k]! * si0;
                xi += mr[k]! * si0 + mi[k]! * sr0;
              }
              s.czr[q * n + g] = xr * w;
              s.czi[q * n + g] = xi * w;
            }
          }
          // a = U·V·W·D for one dwell
          const ou = op.su + 2 * iu[i]!, ov = op.sv + 2 * iv[i]!, ow = op.sw + 2 * iw[i]!;
          const ur = tab[ou]!, ui = tab[ou + 1]!, vr = tab[ov]!, vi = tab[ov + 1]!, wr = tab[ow]!, wi = tab[ow + 1]!;
          const uvr = ur * vr - ui * vi, uvi = ur * vi + ui * vr;
          const pr = uvr * wr - uvi * wi, pi = uvr * wi + uvi * wr;
          const dr = dstep[2 * k0]!, di = dstep[2 * k0 + 1]!;
          ar[g] = pr * dr - pi * di;
          ai[g] = pr * di + pi * dr;
        }
        for (let q = 0; q < coils; q++) {
          sr.fill(0, 0, op.n);
          si.fill(0, 0, op.n);
          if (sens === null) readoutRecurrence(sr, si, op.n, zr, zi, ar, ai, groups);
          else readoutRecurrence(sr, si, op.n, s.czr.subarray(q * n, q * n + groups), s.czi.subarray(q * n, q * n + groups), ar, ai, groups);
          const base = (q * plan.rows + op.row) * plan.read;
          for (let j = 0; j < op.n; j++) {
            const a = sr[j]!, b = si[j]!;
            outRe[base + j] = outRe[base + j]! + (a * op.cr - b * op.ci);
            outIm[base + j] = outIm[base + j]! + (a * op.ci + b * op.cr);
          }
        }
        applyFree(mr, mi, mz, m0, iu, iv, iw, i0, i1, tab, op.u, op.v, op.w, s.d[op.dur]!, s.e1[op.dur]!);
        break;
      }
    }
  }
}
