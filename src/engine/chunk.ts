/**
 * Plays the plan's ops over one chunk of isochromats and accumulates the
 * chunk's k-space. Pure function of (plan, isochromats, chunk index): the same
 * chunk gives the same bits on any thread.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import { applyFree, applyRelax, applyRf } from "./kernels.js";
import { readoutRecurrenceFast } from "./wasm.js";
import type { EnginePlan, Op } from "./plan.js";

/** Isochromats per cache sub-block (state and factors of one sub-block stay in L2 across a segment's ops). */
export const SUB_BLOCK = 2048;
import { f64Words, TupleIndex } from "./hash.js";

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
  /** Readout group of each chunk isochromat, first isochromat of each group, group → live group (−1 if filtered out). */
  groupOf: Int32Array; groupFirst: Int32Array; liveOf: Int32Array;
  groupIndex: TupleIndex; key: Uint32Array;
  sr: Float64Array; si: Float64Array;
  constructor(plan: EnginePlan) {
    const n = plan.maxChunk;
    this.mr = new Float64Array(n); this.mi = new Float64Array(n); this.mz = new Float64Array(n);
    this.d = []; this.e1 = [];
    for (let k = 0; k < plan.durations.length; k++) {
      this.d.push(new Float64Array(2 * n));
      this.e1.push(new Float64Array(n));
    }
    this.zr = new Float64Array(plan.coils * n); this.zi = new Float64Array(plan.coils * n);
    this.ar = new Float64Array(n); this.ai = new Float64Array(n); this.h = new Float64Array(n);
    this.groupOf = new Int32Array(n); this.groupFirst = new Int32Array(n); this.liveOf = new Int32Array(n);
    this.groupIndex = new TupleIndex(7, 4096); this.key = new Uint32Array(7);
    this.sr = new Float64Array(plan.read); this.si = new Float64Array(plan.read);
  }
}

/** Runs chunk `c`; adds its signal into outRe/outIm ([coil][row][read], row-major). */
export function runChunk(plan: EnginePlan, iso: IsochromatSet, c: number, outRe: Float64Array, outIm: Float64Array, s: ChunkScratch): void {
  const i0 = plan.chunkStart[c]!, i1 = plan.chunkStart[c + 1]!, n = i1 - i0;
  const { mr, mi, mz, zr, zi, ar, ai, h, sr, si } = s;
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
  // Readout groups: isochromats with bitwise identical per-sample factors
  // (same read position iu, Δf and T2; and the same iv, iw when the readout
  // gradient has a phase or slice part) are summed before the recurrence.
  // Exact: z_g·a^j + z_h·a^j = (z_g + z_h)·a^j. With a uniform B0 this
  // folds a whole chunk's columns of one read position into one group.
  let groups = 0;
  let groupsByW = -1;
  const tab = plan.tab, rfClass = plan.rfClass, maps = plan.rfMaps, ops = plan.ops;
  const sens = plan.sens, coils = plan.coils, count = iso.count;
  const groupOf = s.groupOf, first = s.groupFirst, liveOf = s.liveOf;
  // The ops are played segment by segment — a segment is the ops up to and
  // including the next readout — and each segment over sub-blocks of
  // SUB_BLOCK isochromats, so a sub-block's state stays in cache across the
  // segment's ops. Every op but the readout recurrence acts per isochromat,
  // and readout sums are accumulated in isochromat order, so the result is
  // bitwise that of playing each op over the whole chunk.
  let o = 0;
  while (o < ops.length) {
    let end = o;
    while (end < ops.length && ops[end]!.t !== "adc") end++;
    const adc = end < ops.length ? (ops[end] as Extract<Op, { t: "adc" }>) : null;
    let live = 0;
    if (adc) {
      if (groupsByW !== (adc.byW ? 1 : 0)) {
        groupsByW = adc.byW ? 1 : 0;
        groups = readoutGroups(iso, i0, i1, adc.byW, s);
      }
      // per-group receiver filter weight and factor a = U·V·W·D for one dwell;
      // groups the filter removes (weight 0) are dropped: they add exactly nothing
      const dstep = s.d[adc.stepDur]!;
      for (let g = 0; g < groups; g++) {
        const k0 = first[g]!, i = i0 + k0;
        const w = plan.receiverFilter ? receiverFilter(adc.fRead * iso.uGrid[iu[i]!]! + df[i]!, adc.bwSampled) : 1;
        if (w === 0) {
          liveOf[g] = -1;
          continue;
        }
        liveOf[g] = live;
        h[live] = w;
        const ou = adc.su + 2 * iu[i]!, ov = adc.sv + 2 * iv[i]!, ow = adc.sw + 2 * iw[i]!;
        const ur = tab[ou]!, ui = tab[ou + 1]!, vr = tab[ov]!, vi = tab[ov + 1]!, wr = tab[ow]!, wi = tab[ow + 1]!;
        const uvr = ur * vr - ui * vi, uvi = ur * vi + ui * vr;
        const pr = uvr * wr - uvi * wi, pi = uvr * wi + uvi * wr;
        const dr = dstep[2 * k0]!, di = dstep[2 * k0 + 1]!;
        ar[live] = pr * dr - pi * di;
        ai[live] = pr * di + pi * dr;
        live++;
      }
      zr.fill(0, 0, coils * live);
      zi.fill(0, 0, coils * live);
    }
    for (let k0 = 0; k0 < n; k0 += SUB_BLOCK) {
      const k1 = Math.min(n, k0 + SUB_BLOCK), a0 = i0 + k0, a1 = i0 + k1;
      for (let q = o; q < end; q++) {
        const op = ops[q]!;
        switch (op.t) {
          case "rf":
            applyRf(mr, mi, mz, m0, rfClass, a0, a1, maps, op.base, op.cos, op.sin, k0);
            break;
          case "free":
            applyFree(mr, mi, mz, m0, iu, iv, iw, a0, a1, tab, op.u, op.v, op.w, s.d[op.dur]!, s.e1[op.dur]!, k0);
            break;
          case "spoil":
            mr.fill(0, k0, k1);
            mi.fill(0, k0, k1);
            break;
          case "relax":
            applyRelax(mz, m0, a0, a1, s.e1[op.dur]!, k0);
            break;
          default:
            break;
        }
      }
      if (!adc) continue;
      // z_g = Σ_{k in g} M_k (·S_q(r_k) with coil sensitivities), in isochromat order; [coil][live group]
      if (sens === null) {
        for (let k = k0; k < k1; k++) {
          const g = liveOf[groupOf[k]!]!;
          if (g < 0) continue;
          zr[g] = zr[g]! + mr[k]!;
          zi[g] = zi[g]! + mi[k]!;
        }
      } else {
        for (let q = 0; q < coils; q++) {
          const so = 2 * q * count, zo = q * live;
          for (let k = k0; k < k1; k++) {
            const g = liveOf[groupOf[k]!]!;
            if (g < 0) continue;
            const sr0 = sens[so + 2 * (i0 + k)]!, si0 = sens[so + 2 * (i0 + k) + 1]!;
            zr[zo + g] = zr[zo + g]! + (mr[k]! * sr0 - mi[k]! * si0);
            zi[zo + g] = zi[zo + g]! + (mr[k]! * si0 + mi[k]! * sr0);
          }
        }
      }
    }
    if (adc) {
      for (let q = 0; q < coils; q++) {
        const zo = q * live;
        for (let g = 0; g < live; g++) {
          zr[zo + g] = zr[zo + g]! * h[g]!;
          zi[zo + g] = zi[zo + g]! * h[g]!;
        }
        sr.fill(0, 0, adc.n);
        si.fill(0, 0, adc.n);
        readoutRecurrenceFast(sr, si, adc.n, q === 0 ? zr : zr.subarray(zo), q === 0 ? zi : zi.subarray(zo), ar, ai, live);
        const base = (q * plan.rows + adc.row) * plan.read;
        for (let j = 0; j < adc.n; j++) {
          const x = sr[j]!, y = si[j]!;
          outRe[base + j] = outRe[base + j]! + (x * adc.cr - y * adc.ci);
          outIm[base + j] = outIm[base + j]! + (x * adc.ci + y * adc.cr);
        }
      }
    }
    o = end + 1;
  }
}

/**
 * Assigns readout groups to isochromats i0 … i1−1: key (iu, Δf, r2) and, when
 * byW, also (iv, iw); bitwise equality. Writes s.groupOf (chunk-local index →
 * group) and s.groupFirst (group → first chunk-local index); returns the
 * number of groups, numbered in first-seen order.
 */
export function readoutGroups(iso: IsochromatSet, i0: number, i1: number, byW: boolean, s: ChunkScratch): number {
  const index = s.groupIndex, key = s.key, groupOf = s.groupOf, first = s.groupFirst;
  const { iu, iv, iw, df, r2 } = iso;
  index.clear();
  for (let i = i0; i < i1; i++) {
    key[0] = iu[i]!;
    f64Words(df[i]!, key, 1);
    f64Words(r2[i]!, key, 3);
    key[5] = byW ? iv[i]! : 0;
    key[6] = byW ? iw[i]! : 0;
    const before = index.size;
    const g = index.id(key, 0);
    if (g === before) first[g] = i - i0;
    groupOf[i - i0] = g;
  }
  return index.size;
}
