/**
 * The readout shared by both chunk paths (general.ts, spoiled.ts): readout
 * groups (isochromats with bitwise identical per-sample factors), their
 * receiver filter weights and per-dwell factors, and the recurrence that
 * turns the group sums into samples of one k-space row.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import { f64Words, TupleIndex } from "./hash.js";
import type { EnginePlan, Op } from "./plan.js";
import { readoutRecurrenceFast } from "./wasm.js";

/** A readout op of the plan. */
export type AdcOp = Extract<Op, { kind: "adc" }>;

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

/** Scratch of the readout, sized for the plan's largest chunk; reused across chunks and ADCs. */
export class ReadoutScratch {
  /** Group sums [coil][live group], per-dwell factors and filter weights per live group. */
  zr: Float64Array; zi: Float64Array; ar: Float64Array; ai: Float64Array; h: Float64Array;
  /** Readout group of each chunk isochromat, first isochromat of each group, group → live group (−1 if filtered out). */
  groupOf: Int32Array; groupFirst: Int32Array; liveOf: Int32Array;
  groupIndex: TupleIndex; key: Uint32Array;
  /** Samples of one row and coil. */
  sr: Float64Array; si: Float64Array;
  constructor(plan: EnginePlan) {
    const n = plan.maxChunk;
    this.zr = new Float64Array(plan.coils * n); this.zi = new Float64Array(plan.coils * n);
    this.ar = new Float64Array(n); this.ai = new Float64Array(n); this.h = new Float64Array(n);
    this.groupOf = new Int32Array(n); this.groupFirst = new Int32Array(n); this.liveOf = new Int32Array(n);
    this.groupIndex = new TupleIndex(7, 4096); this.key = new Uint32Array(7);
    this.sr = new Float64Array(plan.read); this.si = new Float64Array(plan.read);
  }
}

/**
 * Assigns readout groups to isochromats i0 … i1−1: key (iu, Δf, r2) and, when
 * byPhaseAndSlice, also (iv, iw); bitwise equality. Writes s.groupOf (chunk-local index →
 * group) and s.groupFirst (group → first chunk-local index); returns the
 * number of groups, numbered in first-seen order.
 */
export function readoutGroups(iso: IsochromatSet, i0: number, i1: number, byPhaseAndSlice: boolean, s: ReadoutScratch): number {
  const index = s.groupIndex, key = s.key, groupOf = s.groupOf, first = s.groupFirst;
  const { iu, iv, iw, df, r2 } = iso;
  index.clear();
  for (let i = i0; i < i1; i++) {
    key[0] = iu[i]!;
    f64Words(df[i]!, key, 1);
    f64Words(r2[i]!, key, 3);
    key[5] = byPhaseAndSlice ? iv[i]! : 0;
    key[6] = byPhaseAndSlice ? iw[i]! : 0;
    const before = index.size;
    const g = index.id(key, 0);
    if (g === before) first[g] = i - i0;
    groupOf[i - i0] = g;
  }
  return index.size;
}

/**
 * Per live readout group of one ADC: receiver filter weight h_g and the
 * per-dwell factor a_g = U·V·W·D of its first isochromat into s.h, s.ar,
 * s.ai; groups the filter removes (weight 0) get liveOf −1 (they add exactly
 * nothing). `dwellFactor` holds D = exp(−t·r2)·exp(−i2πΔf·t) over one dwell,
 * interleaved, at least at each group's first chunk-local index. Zeroes the
 * group sums s.zr, s.zi. Returns the live group count.
 */
export function adcGroups(plan: EnginePlan, iso: IsochromatSet, i0: number, adc: AdcOp, groups: number, dwellFactor: Float64Array, s: ReadoutScratch): number {
  const { iu, iv, iw, df } = iso;
  const { ar, ai, h, zr, zi } = s;
  const first = s.groupFirst, liveOf = s.liveOf, tab = plan.tab;
  const dstep = dwellFactor;
  let live = 0;
  for (let g = 0; g < groups; g++) {
    const k0 = first[g]!, i = i0 + k0;
    const w = plan.receiverFilter ? receiverFilter(adc.readHzPerMetre * iso.uGrid[iu[i]!]! + df[i]!, adc.sampledBandwidth) : 1;
    if (w === 0) {
      liveOf[g] = -1;
      continue;
    }
    liveOf[g] = live;
    h[live] = w;
    const ou = adc.dwellReadTable + 2 * iu[i]!, ov = adc.dwellPhaseTable + 2 * iv[i]!, ow = adc.dwellSliceTable + 2 * iw[i]!;
    const ur = tab[ou]!, ui = tab[ou + 1]!, vr = tab[ov]!, vi = tab[ov + 1]!, wr = tab[ow]!, wi = tab[ow + 1]!;
    const uvr = ur * vr - ui * vi, uvi = ur * vi + ui * vr;
    const pr = uvr * wr - uvi * wi, pi = uvr * wi + uvi * wr;
    const dr = dstep[2 * k0]!, di = dstep[2 * k0 + 1]!;
    ar[live] = pr * dr - pi * di;
    ai[live] = pr * di + pi * dr;
    live++;
  }
  zr.fill(0, 0, plan.coils * live);
  zi.fill(0, 0, plan.coils * live);
  return live;
}

/**
 * Filters the group sums by h_g, runs the readout recurrence per coil and adds
 * the samples, times weight·exp(−i·receiver phase), into row adc.row.
 */
export function adcOutput(plan: EnginePlan, adc: AdcOp, live: number, outRe: Float64Array, outIm: Float64Array, s: ReadoutScratch): void {
  const { zr, zi, ar, ai, h, sr, si } = s;
  for (let q = 0; q < plan.coils; q++) {
    const zo = q * live;
    for (let g = 0; g < live; g++) {
      zr[zo + g] = zr[zo + g]! * h[g]!;
      zi[zo + g] = zi[zo + g]! * h[g]!;
    }
    sr.fill(0, 0, adc.samples);
    si.fill(0, 0, adc.samples);
    readoutRecurrenceFast(sr, si, adc.samples, q === 0 ? zr : zr.subarray(zo), q === 0 ? zi : zi.subarray(zo), ar, ai, live, plan.wasm);
    const base = (q * plan.rows + adc.row) * plan.read;
    for (let j = 0; j < adc.samples; j++) {
      const x = sr[j]!, y = si[j]!;
      outRe[base + j] = outRe[base + j]! + (x * adc.weightRe - y * adc.weightIm);
      outIm[base + j] = outIm[base + j]! + (x * adc.weightIm + y * adc.weightRe);
    }
  }
}
