/**
 * The ideally spoiled shortcut of the chunk runner: Mz per RF class instead of
 * per isochromat, readout group sums from per-class transverse values times
 * in-plane phase factors (see runChunkSpoiled), and the readout through
 * readout.ts.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import type { EnginePlan } from "./plan.js";
import { adcGroups, adcOutput, readoutGroups, type ReadoutScratch } from "./readout.js";
import { rfOnState } from "./kernels.js";
import { FoldScratch, foldOutput } from "./fold.js";

/** Scratch of the spoiled shortcut, sized for the plan's largest chunk; reused across chunks. */
export class SpoiledScratch {
  /** Global class → chunk-local class (−1 when absent; reset after each chunk). */
  localOf: Int32Array;
  /** Chunk-local class of each chunk isochromat; first isochromat (global index) of each local class. */
  lc: Int32Array; firstOf: Int32Array;
  /** Per local class: Mz per unit m0, and the transverse state per unit m0 without the in-plane factors. */
  mz: Float64Array; pr: Float64Array; pi: Float64Array;
  /** A pulse's result on one class's whole state (x, y, z): kernels.ts rfOnState. */
  rfOut = new Float64Array(3);
  /** The readout fold's scratch (plan.fold set: the group sums go to foldOutput instead of adcOutput). */
  fold: FoldScratch | null = null;
  /** Per duration and local class: D = exp(−t·r2)·exp(−i2πΔf·t) (interleaved) and E1 = exp(−t·r1). */
  d: Float64Array[]; e1: Float64Array[];
  /** Per chunk isochromat (filled at each readout group's first): D over one dwell, interleaved. */
  dwell: Float64Array;
  /** Accumulated in-plane phase factors since the last pulse, per read and per phase grid index (interleaved). */
  ua: Float64Array; va: Float64Array;
  /**
   * Slots: the isochromats of one column and one readout group — start in
   * mem, group, pattern. A pattern is a slot's list of (local class, m0),
   * bitwise; slots of one pattern have the same sum Σ m0·P_c.
   * patFirst/patLen: the mem range of a representative slot of each pattern.
   */
  slotStart: Int32Array; slotGroup: Int32Array; slotPat: Int32Array;
  patFirst: Int32Array; patLen: Int32Array; sumR: Float64Array; sumI: Float64Array;
  /** Slot members (chunk-local indices, slot by slot); slot of each isochromat; fill counters. */
  mem: Int32Array; memSlot: Int32Array; fill: Int32Array;
  constructor(plan: EnginePlan, iso: IsochromatSet) {
    const n = plan.maxChunk;
    this.mem = new Int32Array(n); this.memSlot = new Int32Array(n); this.fill = new Int32Array(n);
    this.slotStart = new Int32Array(n + 1); this.slotGroup = new Int32Array(n); this.slotPat = new Int32Array(n);
    this.patFirst = new Int32Array(n); this.patLen = new Int32Array(n); this.sumR = new Float64Array(n); this.sumI = new Float64Array(n);
    this.localOf = new Int32Array(plan.classes).fill(-1);
    this.lc = new Int32Array(n); this.firstOf = new Int32Array(n);
    this.mz = new Float64Array(n); this.pr = new Float64Array(n); this.pi = new Float64Array(n);
    this.d = []; this.e1 = [];
    for (let k = 0; k < plan.durations.length; k++) {
      this.d.push(new Float64Array(2 * n));
      this.e1.push(new Float64Array(n));
    }
    this.dwell = new Float64Array(2 * n);
    this.ua = new Float64Array(2 * iso.uGrid.length); this.va = new Float64Array(2 * iso.vGrid.length);
  }
}

/**
 * The ideally spoiled shortcut, exact (the same sums in another order:
 * agrees with runChunkGeneral (general.ts) to rounding, and is a pure function of
 * the chunk, so any number of workers or shards gives the same bits).
 *
 * Valid when every run of ops between ideal spoils holds at most one pulse
 * (plan.spoiledFast), and for balanced sequences (plan.classState: no in-plane
 * moment left at a pulse, so the state there is m0 times a function of the
 * class, the pulse then acting on the class's whole state; below, spoiled). Mxy is then zero before each pulse, and every op acts on
 * Mz as Mz ← Mz·E1 + m0·(1 − E1) or Mz ← a22·Mz + b2·m0 with factors of the
 * RF class c alone (Δf, T1, T2, slice position), so Mz = m0·mz_c: one number
 * per class instead of one per isochromat. After the pulse the transverse
 * state is m0·T_c with T_c = e^{iφ}·((a02 + i·a12)·mz_c + b0 + i·b1), and the
 * free intervals up to a readout multiply it by Π U[iu]·V[iv]·W[iw]·D, where
 * W·D depends on the class and U, V on the read and phase grid index alone.
 * So the readout group sums are z_g = Σ_{i∈g} m0_i·P_{c(i)}·Ua[iu_i]·Va[iv_i]
 * with P_c = T_c·Π W·D and Ua, Va the products of the U and V tables since
 * the pulse. Within a column (one iu, iv) Ua·Va is common, so per slot
 * (column × readout group) z_g += (Σ_slot m0·P_c)·Ua·Va, and slots with
 * bitwise the same list of (class, m0) — a pattern — share the inner sum,
 * computed once per pattern and readout (with coil sensitivities: one term
 * per isochromat). This replaces the pulse, interval and relaxation updates
 * of every isochromat every TR.
 */
export function runChunkSpoiled(plan: EnginePlan, iso: IsochromatSet, c: number, outRe: Float64Array, outIm: Float64Array, f: SpoiledScratch, s: ReadoutScratch): void {
  const i0 = plan.chunkStart[c]!, i1 = plan.chunkStart[c + 1]!, n = i1 - i0;
  const { localOf, lc, firstOf, mz, pr, pi, ua, va } = f;
  const { m0, r1, r2, df, iu, iv, iw } = iso;
  const rfClass = plan.rfClass, maps = plan.rfMaps, tab = plan.tab, ops = plan.ops;
  const sens = plan.sens, coils = plan.coils, count = iso.count;
  const nu = iso.uGrid.length, nv = iso.vGrid.length;
  // chunk-local classes in first-seen order
  let nc = 0;
  for (let k = 0; k < n; k++) {
    const g = rfClass[i0 + k]!;
    let l = localOf[g]!;
    if (l < 0) {
      l = nc++;
      localOf[g] = l;
      firstOf[l] = i0 + k;
    }
    lc[k] = l;
  }
  for (let l = 0; l < nc; l++) localOf[rfClass[firstOf[l]!]!] = -1;
  // per class and duration: D and E1 (the same formulas as the general path's per-isochromat factors)
  for (let q = 0; q < plan.durations.length; q++) {
    const t = plan.durations[q]!, d = f.d[q]!, e1 = f.e1[q]!;
    for (let l = 0; l < nc; l++) {
      const i = firstOf[l]!;
      const e2 = Math.exp(-t * r2[i]!), th = -2 * Math.PI * df[i]! * t;
      d[2 * l] = e2 * Math.cos(th);
      d[2 * l + 1] = e2 * Math.sin(th);
      e1[l] = Math.exp(-t * r1[i]!);
    }
  }
  // the read and phase grid indices present in the chunk: the in-plane factors are kept for these only
  let u0 = nu, u1 = 0, v0 = nv, v1 = 0;
  for (let i = i0; i < i1; i++) {
    const a = iu[i]!, b = iv[i]!;
    if (a < u0) u0 = a;
    if (a >= u1) u1 = a + 1;
    if (b < v0) v0 = b;
    if (b >= v1) v1 = b + 1;
  }
  mz.fill(1, 0, nc);
  let active = false;
  let groups = 0, groupedByPhaseAndSlice = -1, slots = 0, pats = 0, adcIndex = 0;
  const groupOf = s.groupOf, liveOf = s.liveOf, zr = s.zr, zi = s.zi;
  const { slotStart, slotGroup, slotPat, patFirst, patLen, sumR, sumI, mem } = f;
  for (let o = 0; o < ops.length; o++) {
    const op = ops[o]!;
    switch (op.kind) {
      case "rf": {
        const cs = op.cosPhase, sn = op.sinPhase;
        if (active) {
          // a transverse part before the pulse (a balanced sequence, plan.classState): the whole map, as applyRf
          const out = f.rfOut;
          for (let l = 0; l < nc; l++) {
            rfOnState(maps, op.mapOffset + rfClass[firstOf[l]!]! * 12, pr[l]!, pi[l]!, mz[l]!, cs, sn, out);
            pr[l] = out[0]!;
            pi[l] = out[1]!;
            mz[l] = out[2]!;
          }
        } else {
          for (let l = 0; l < nc; l++) {
            const b = op.mapOffset + rfClass[firstOf[l]!]! * 12;
            const z = mz[l]!;
            const x = maps[b + 2]! * z + maps[b + 9]!;
            const y = maps[b + 5]! * z + maps[b + 10]!;
            mz[l] = maps[b + 8]! * z + maps[b + 11]!;
            pr[l] = x * cs - y * sn;
            pi[l] = x * sn + y * cs;
          }
        }
        for (let j = u0; j < u1; j++) {
          ua[2 * j] = 1;
          ua[2 * j + 1] = 0;
        }
        for (let j = v0; j < v1; j++) {
          va[2 * j] = 1;
          va[2 * j + 1] = 0;
        }
        active = true;
        break;
      }
      case "free": {
        const d = f.d[op.durationIndex]!, e1 = f.e1[op.durationIndex]!;
        for (let l = 0; l < nc; l++) {
          const e = e1[l]!;
          mz[l] = mz[l]! * e + (1 - e);
        }
        if (!active) break;
        for (let l = 0; l < nc; l++) {
          const ow = op.sliceTable + 2 * iw[firstOf[l]!]!;
          const wr = tab[ow]!, wi = tab[ow + 1]!, dr = d[2 * l]!, di = d[2 * l + 1]!;
          const qr = wr * dr - wi * di, qi = wr * di + wi * dr;
          const xr = pr[l]!, xi = pi[l]!;
          pr[l] = xr * qr - xi * qi;
          pi[l] = xr * qi + xi * qr;
        }
        for (let j = u0; j < u1; j++) {
          const xr = ua[2 * j]!, xi = ua[2 * j + 1]!, tr = tab[op.readTable + 2 * j]!, ti = tab[op.readTable + 2 * j + 1]!;
          ua[2 * j] = xr * tr - xi * ti;
          ua[2 * j + 1] = xr * ti + xi * tr;
        }
        for (let j = v0; j < v1; j++) {
          const xr = va[2 * j]!, xi = va[2 * j + 1]!, tr = tab[op.phaseTable + 2 * j]!, ti = tab[op.phaseTable + 2 * j + 1]!;
          va[2 * j] = xr * tr - xi * ti;
          va[2 * j + 1] = xr * ti + xi * tr;
        }
        break;
      }
      case "relax": {
        const e1 = f.e1[op.durationIndex]!;
        for (let l = 0; l < nc; l++) {
          const e = e1[l]!;
          mz[l] = mz[l]! * e + (1 - e);
        }
        break;
      }
      case "spoil":
        active = false;
        break;
      case "adc": {
        const a = adcIndex++;
        // no transverse magnetization before the first pulse of a run: the readout adds nothing
        if (!active) break;
        if (groupedByPhaseAndSlice !== (op.groupByPhaseAndSlice ? 1 : 0)) {
          groupedByPhaseAndSlice = op.groupByPhaseAndSlice ? 1 : 0;
          groups = readoutGroups(iso, i0, i1, op.groupByPhaseAndSlice, s);
          [slots, pats] = spoiledSlots(iso, i0, n, f, groupOf);
        }
        {
          // the per-dwell D = exp(−t·r2)·exp(−i2πΔf·t) of each group's first isochromat (the general path's formula)
          const t = plan.durations[op.dwellDurationIndex]!, d = f.dwell, first = s.groupFirst;
          for (let g = 0; g < groups; g++) {
            const k = first[g]!, i = i0 + k;
            const e2 = Math.exp(-t * r2[i]!), th = -2 * Math.PI * df[i]! * t;
            d[2 * k] = e2 * Math.cos(th);
            d[2 * k + 1] = e2 * Math.sin(th);
          }
        }
        const live = adcGroups(plan, iso, i0, op, groups, f.dwell, s);
        if (sens === null) {
          // Σ m0·P_c once per pattern, then z_g += S_pattern·Ua[iu]·Va[iv] once per slot
          for (let p = 0; p < pats; p++) {
            const k0 = patFirst[p]!, k1 = k0 + patLen[p]!;
            let xr = 0, xi = 0;
            for (let j = k0; j < k1; j++) {
              const k = mem[j]!, l = lc[k]!, m = m0[i0 + k]!;
              xr += pr[l]! * m;
              xi += pi[l]! * m;
            }
            sumR[p] = xr;
            sumI[p] = xi;
          }
          let lu = -1, lv = -1, cr = 0, ci = 0;
          for (let q = 0; q < slots; q++) {
            const g = liveOf[slotGroup[q]!]!;
            if (g < 0) continue;
            const i = i0 + mem[slotStart[q]!]!, a = iu[i]!, b = iv[i]!;
            if (a !== lu || b !== lv) {
              lu = a;
              lv = b;
              const ur = ua[2 * a]!, ui = ua[2 * a + 1]!, vr = va[2 * b]!, vi = va[2 * b + 1]!;
              cr = ur * vr - ui * vi;
              ci = ur * vi + ui * vr;
            }
            const p = slotPat[q]!, xr = sumR[p]!, xi = sumI[p]!;
            zr[g] = zr[g]! + (xr * cr - xi * ci);
            zi[g] = zi[g]! + (xr * ci + xi * cr);
          }
          if (plan.fold) foldOutput(plan, iso, i0, op, a, groups, live, outRe, outIm, s, (f.fold ??= new FoldScratch()));
          else adcOutput(plan, op, live, outRe, outIm, s);
          break;
        }
        // z_g = Σ_{i∈g} m0_i·P_c·Ua[iu]·Va[iv] (·S_q(r_i)), in isochromat order; [coil][live group]
        let lu = -1, lv = -1, cr = 0, ci = 0;
        for (let k = 0; k < n; k++) {
          const g = liveOf[groupOf[k]!]!;
          if (g < 0) continue;
          const i = i0 + k, a = iu[i]!, b = iv[i]!;
          if (a !== lu || b !== lv) {
            lu = a;
            lv = b;
            const ur = ua[2 * a]!, ui = ua[2 * a + 1]!, vr = va[2 * b]!, vi = va[2 * b + 1]!;
            cr = ur * vr - ui * vi;
            ci = ur * vi + ui * vr;
          }
          const l = lc[k]!, m = m0[i]!;
          const xr0 = pr[l]! * m, xi0 = pi[l]! * m;
          const xr = xr0 * cr - xi0 * ci, xi = xr0 * ci + xi0 * cr;
          if (sens === null) {
            zr[g] = zr[g]! + xr;
            zi[g] = zi[g]! + xi;
          } else {
            for (let q = 0; q < coils; q++) {
              const so = 2 * (q * count + i), zo = q * live + g;
              const s0 = sens[so]!, s1 = sens[so + 1]!;
              zr[zo] = zr[zo]! + (xr * s0 - xi * s1);
              zi[zo] = zi[zo]! + (xr * s1 + xi * s0);
            }
          }
        }
        if (plan.fold) foldOutput(plan, iso, i0, op, a, groups, live, outRe, outIm, s, (f.fold ??= new FoldScratch()));
        else adcOutput(plan, op, live, outRe, outIm, s);
        break;
      }
    }
  }
}

/**
 * Splits chunk isochromats 0 … n−1 into slots (the isochromats of one column
 * and one readout group; members listed in f.mem, slot q at
 * mem[slotStart[q] … slotStart[q+1]−1], in isochromat order; slots in
 * first-seen order) and numbers the slots' patterns (list of local class and
 * m0 bits) in first-seen order; see SpoiledScratch. Returns [slots, patterns].
 */
function spoiledSlots(iso: IsochromatSet, i0: number, n: number, f: SpoiledScratch, groupOf: Int32Array): [number, number] {
  const { iu, iv, m0 } = iso;
  const { lc, slotStart, slotGroup, slotPat, patFirst, patLen, mem, memSlot, fill } = f;
  const index = new Map<string, number>();
  const m0Bits = new Float64Array(1), m0Words = new Uint32Array(m0Bits.buffer);
  let slots = 0, pos = 0;
  let k = 0;
  while (k < n) {
    const a = iu[i0 + k]!, b = iv[i0 + k]!;
    let e = k + 1;
    while (e < n && iu[i0 + e] === a && iv[i0 + e] === b) e++;
    // the column's slots, one per readout group, in first-seen order
    const s0 = slots;
    for (let j = k; j < e; j++) {
      const g = groupOf[j]!;
      let q = s0;
      while (q < slots && slotGroup[q] !== g) q++;
      if (q === slots) {
        slotGroup[q] = g;
        fill[q] = 0;
        slots++;
      }
      memSlot[j] = q;
      fill[q] = fill[q]! + 1;
    }
    for (let q = s0; q < slots; q++) {
      const c = fill[q]!;
      slotStart[q] = pos;
      fill[q] = pos;
      pos += c;
    }
    for (let j = k; j < e; j++) {
      const q = memSlot[j]!;
      mem[fill[q]!] = j;
      fill[q] = fill[q]! + 1;
    }
    for (let q = s0; q < slots; q++) {
      const m1 = q + 1 < slots ? slotStart[q + 1]! : pos;
      let key = "";
      for (let j = slotStart[q]!; j < m1; j++) {
        m0Bits[0] = m0[i0 + mem[j]!]!;
        key += `${lc[mem[j]!]!}:${m0Words[0]!}:${m0Words[1]!},`;
      }
      let p = index.get(key);
      if (p === undefined) {
        p = index.size;
        index.set(key, p);
        patFirst[p] = slotStart[q]!;
        patLen[p] = m1 - slotStart[q]!;
      }
      slotPat[q] = p;
    }
    k = e;
  }
  slotStart[slots] = pos;
  return [slots, index.size];
}
