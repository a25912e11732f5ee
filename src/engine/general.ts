/**
 * The general chunk path: plays every op of the plan on every isochromat of
 * one chunk (the oracle of the shortcuts), and the readout through readout.ts.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import { applyFree, applyRelax, applyRf } from "./kernels.js";
import type { EnginePlan } from "./plan.js";
import { adcGroups, adcOutput, readoutGroups, type AdcOp, type ReadoutScratch } from "./readout.js";
import { FoldScratch, foldOutput } from "./fold.js";

/** Isochromats per cache sub-block (state and factors of one sub-block stay in L2 across a segment's ops). */
export const SUB_BLOCK = 2048;

/** Scratch of the general path, sized for the plan's largest chunk; reused across chunks. */
export class GeneralScratch {
  /** State of each chunk isochromat: Mx, My, Mz. */
  mr: Float64Array; mi: Float64Array; mz: Float64Array;
  /** Per distinct duration and chunk isochromat: D = exp(−t/T2)·exp(−i2πΔf·t) (interleaved) and E1 = exp(−t/T1). */
  d: Float64Array[]; e1: Float64Array[];
  /** The fold's per-group cache (plans with a fold only). */
  fold: FoldScratch | null = null;
  constructor(plan: EnginePlan) {
    const n = plan.maxChunk;
    this.mr = new Float64Array(n); this.mi = new Float64Array(n); this.mz = new Float64Array(n);
    this.d = []; this.e1 = [];
    for (let k = 0; k < plan.durations.length; k++) {
      this.d.push(new Float64Array(2 * n));
      this.e1.push(new Float64Array(n));
    }
  }
}

/** Runs chunk `c` playing every op on every isochromat (the general path and the oracle of the shortcuts). */
export function runChunkGeneral(plan: EnginePlan, iso: IsochromatSet, c: number, outRe: Float64Array, outIm: Float64Array, s: GeneralScratch, r: ReadoutScratch): void {
  const i0 = plan.chunkStart[c]!, i1 = plan.chunkStart[c + 1]!, n = i1 - i0;
  const { mr, mi, mz } = s;
  const { zr, zi } = r;
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
  let groupedByPhaseAndSlice = -1;
  const tab = plan.tab, rfClass = plan.rfClass, maps = plan.rfMaps, ops = plan.ops;
  const sens = plan.sens, coils = plan.coils, count = iso.count;
  const groupOf = r.groupOf, liveOf = r.liveOf;
  // The ops are played segment by segment — a segment is the ops up to and
  // including the next readout — and each segment over sub-blocks of
  // SUB_BLOCK isochromats, so a sub-block's state stays in cache across the
  // segment's ops. Every op but the readout recurrence acts per isochromat,
  // and readout sums are accumulated in isochromat order, so the result is
  // bitwise that of playing each op over the whole chunk.
  let o = 0, adcIndex = 0;
  while (o < ops.length) {
    let end = o;
    while (end < ops.length && ops[end]!.kind !== "adc") end++;
    const adc = end < ops.length ? (ops[end] as AdcOp) : null;
    let live = 0;
    if (adc) {
      if (groupedByPhaseAndSlice !== (adc.groupByPhaseAndSlice ? 1 : 0)) {
        groupedByPhaseAndSlice = adc.groupByPhaseAndSlice ? 1 : 0;
        groups = readoutGroups(iso, i0, i1, adc.groupByPhaseAndSlice, r);
      }
      live = adcGroups(plan, iso, i0, adc, groups, s.d[adc.dwellDurationIndex]!, r);
    }
    for (let k0 = 0; k0 < n; k0 += SUB_BLOCK) {
      const k1 = Math.min(n, k0 + SUB_BLOCK), a0 = i0 + k0, a1 = i0 + k1;
      for (let q = o; q < end; q++) {
        const op = ops[q]!;
        switch (op.kind) {
          case "rf":
            applyRf(mr, mi, mz, m0, rfClass, a0, a1, maps, op.mapOffset, op.cosPhase, op.sinPhase, k0);
            break;
          case "free":
            applyFree(mr, mi, mz, m0, iu, iv, iw, a0, a1, tab, op.readTable, op.phaseTable, op.sliceTable, s.d[op.durationIndex]!, s.e1[op.durationIndex]!, k0);
            break;
          case "spoil":
            mr.fill(0, k0, k1);
            mi.fill(0, k0, k1);
            break;
          case "relax":
            applyRelax(mz, m0, a0, a1, s.e1[op.durationIndex]!, k0);
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
      // with a fold (fold.ts) the partial holds Y of every readout instead of k-space
      if (plan.fold) foldOutput(plan, iso, i0, adc, adcIndex, groups, live, outRe, outIm, r, (s.fold ??= new FoldScratch()));
      else adcOutput(plan, adc, live, outRe, outIm, r);
      adcIndex++;
    }
    o = end + 1;
  }
}
