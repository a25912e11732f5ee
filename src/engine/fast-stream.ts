/**
 * The fast readout operator's weights straight from the phantom's sampled
 * cells (isochromats/index.ts sampleCells), never storing an isochromat:
 * memory grows with the grid and the cell list, not with isochromats.
 *
 * Without a B0 model an isochromat's RF class is fixed by its through-slice
 * index w, tissue, spectral peak and T2′ bin, so the classes are enumerated
 * from the tissues (no hashing of isochromats), and each (w, tissue, place in
 * the voxel) has one list of terms (class, m0 per unit pd·fraction, Δf): the
 * same terms, in the same order, as the isochromats expandCells stores
 * (isochromats/index.ts cellTerms). A column is then Σ over its cells of
 * pd·fraction × its terms, folded into the (line rank, segment) weights.
 * With a B0 model the Δf of an isochromat is its cell's B0 plus the term's
 * offset, so the classes are hashed in one pass over the cells (exactly as
 * plan.ts rfClasses hashes stored isochromats: through-slice index and the
 * bits of Δf, r1, r2); only the class id of each term is kept (4 bytes per
 * isochromat, against the stored set's arrays), and the class table.
 * Where the classes are too many for the operator (MAX_CLASSES here, the line
 * factor's size in fast.ts fastPrecheck) the caller runs the stored path.
 *
 * Where a B0 model gives more classes than INTERP_MIN_CLASSES (Δf differs in
 * every cell), the classes are instead nodes in Δf, spaced `stepHz`, per
 * (through-slice index, tissue): an isochromat of frequency Δf is replaced by
 * the INTERP_ORDER isochromats at the nodes around it, weighted by the
 * Lagrange polynomials at Δf (DfNodes). What is interpolated is the whole
 * signal of the isochromat as a function of Δf — the RF response, the
 * precession up to the readout and the readout's own decay and precession —
 * a smooth function whose Δf-derivatives are bounded by (2πτ)^k, τ the span
 * from a coherence's first pulse to the end of its readout (coherenceSpan);
 * the node step is set from that bound and the tolerance (stepFor). Seeded
 * probe classes at exact Δf check it after the history (interpolationError).
 */
import type { ColumnFolder } from "./fast.js";
import { cellTerms, type IsochromatCells } from "../isochromats/index.js";
import { receiverFilter } from "./chunk.js";
import { projectThroughSlice, throughSliceBasis } from "./slice-basis.js";
import { FoldMoments } from "./fold-wasm.js";
import { kernelSwitch } from "./wasm-asm.js";
import { openPosition } from "./fast-phase.js";
import { addSegments, estimateOver, mulberry32, type ColumnVisitor, type EstimateFinish, type History, type OneCoilTables } from "./fast.js";
import type { EnginePlan, RfClassSpec } from "./plan.js";
import { decodeClassKeys, sharedF64 } from "./plan.js";
import { f64Words, TupleIndex } from "./hash.js";
import type { CoilArray } from "../dataset/coils.js";
import type { Block } from "../sequence/types.js";

/** More RF classes than this (a B0 model giving each cell its own Δf) are not hashed: the stored path runs. */
export const MAX_STREAM_CLASSES = 1 << 22;

/** A B0 model with more exact classes than this interpolates in Δf (when the caller allows it and the nodes are fewer). */
export const INTERP_MIN_CLASSES = 1 << 16;
let interpMinClasses = INTERP_MIN_CLASSES;
/** Tests: interpolate in Δf from this many exact classes (0: whenever there is a B0 model, even where the nodes are more); returns the previous value. */
export function setInterpolationMinClasses(n: number): number {
  const old = interpMinClasses;
  interpMinClasses = n;
  return old;
}
/** Points of the Lagrange interpolation in Δf (even: nodes on both sides of Δf). */
export const INTERP_ORDER = 6;
/** The fold's shift tables (shiftTables) at most this many numbers (Float64; 512 MiB); beyond, the per-node fold runs. */
const TABLE_DOUBLES = 64 * 2 ** 20;
/** Probe classes at exact Δf (seeded) checking the interpolation after the history. */
export const INTERP_PROBES = 48;
const INTERP_SEED = 40213;

/** What the caller allows: interpolation in Δf for a sequence whose coherences span `span` s, within `tolerance` (relative). */
export interface InterpolationOptions {
  span: number;
  tolerance: number;
}

/**
 * Longest span (s) from the first pulse after an ideal spoil (or the start) to
 * the end of a readout of that coherence: the transverse signal at a readout
 * depends on Δf through the pulses and precession within this span only.
 */
export function coherenceSpan(seq: { blocks: readonly Block[]; pulses: readonly { duration: number }[] }): number {
  let t = 0, start = NaN, span = 0;
  for (const b of seq.blocks) {
    if (b.kind === "rf") {
      if (Number.isNaN(start)) start = t;
      t += seq.pulses[b.pulse]!.duration;
    } else if (b.kind === "free") t += b.duration;
    else if (b.kind === "adc") {
      t += b.samples * b.dwell;
      if (!Number.isNaN(start)) span = Math.max(span, t - start);
    } else start = NaN;
  }
  return span;
}

/** max over s in [0, 1) of |Π_j (s − a_j)|, a_j = j − (p/2 − 1): the node polynomial of p-point interpolation on unit steps. */
function nodePolynomialMax(p: number): number {
  let m = 0;
  for (let k = 0; k <= 1000; k++) {
    const s = k / 1000;
    let v = 1;
    for (let j = 0; j < p; j++) v *= s - (j - (p / 2 - 1));
    m = Math.max(m, Math.abs(v));
  }
  return m;
}

/**
 * Node step (Hz) for p-point interpolation of a function whose k-th
 * Δf-derivative is at most (2πτ)^k times its size: the remainder bound
 * (2πτh)^p·max|Π(s − a_j)|/p! (the remainder of Lagrange interpolation,
 * f − p_f = f^(p)(ξ)/p!·Π(x − x_j); common practice) set equal to `eps`.
 */
export function stepFor(eps: number, span: number, p = INTERP_ORDER): number {
  let fact = 1;
  for (let k = 2; k <= p; k++) fact *= k;
  return (eps * fact / nodePolynomialMax(p)) ** (1 / p) / (2 * Math.PI * Math.max(span, 1e-9));
}

/**
 * Nodes in Δf per group g = (through-slice index, tissue): node k of group g is
 * class gBase[g] + k at Δf = gLo[g] + (k − (p/2 − 1))·step, k = 0 … gM[g] + p − 1.
 */
export class DfNodes {
  readonly p = INTERP_ORDER;
  /** 1 / the Lagrange denominators Π_{j≠i}(a_i − a_j). */
  private readonly inv: Float64Array;
  /** Prefix products Π_{j<i}(s − a_j). */
  private readonly pre: Float64Array;
  constructor(readonly step: number, readonly gLo: Float64Array, readonly gBase: Int32Array, readonly gM: Int32Array, readonly eB0: Float64Array) {
    const p = this.p;
    this.inv = new Float64Array(p);
    this.pre = new Float64Array(p + 1);
    for (let i = 0; i < p; i++) {
      let v = 1;
      for (let j = 0; j < p; j++) if (j !== i) v *= i - j;
      this.inv[i] = 1 / v;
    }
  }

  /** Δf of group g → its first node's class (returned) and the p weights in wt. */
  expand(df: number, g: number, wt: Float64Array): number {
    const p = this.p, h = p / 2 - 1, pre = this.pre;
    const x = (df - this.gLo[g]!) / this.step;
    let m = Math.floor(x);
    if (m < 0) m = 0;
    else if (m > this.gM[g]!) m = this.gM[g]!;
    const s = x - m;
    // ℓ_i(s) = Π_{j<i}(s − a_j) · Π_{j>i}(s − a_j) / Π_{j≠i}(a_i − a_j), from prefix and suffix products
    pre[0] = 1;
    for (let j = 0; j < p; j++) pre[j + 1] = pre[j]! * (s - (j - h));
    let suf = 1;
    for (let i = p - 1; i >= 0; i--) {
      wt[i] = pre[i]! * suf * this.inv[i]!;
      suf *= s - (i - h);
    }
    return this.gBase[g]! + m;
  }
}

/**
 * Complex receive sensitivities of `coils` coils at `count` points (m):
 * out[2·(q·count + i)] (re, im) for coil q, point i.
 */
export interface CellSensitivities {
  coils: number;
  at(x: Float64Array, y: Float64Array, z: Float64Array, count: number, out: Float64Array): void;
  /** When `at` is the uniform coil then these loops (dataset/coils.ts uniformAndLoops): plain data a helper thread can evaluate too. */
  loops?: CoilArray;
}

/**
 * Sensitivities per (column, through-slice index) are cached up to this many
 * numbers (Float64). A fold pass and the estimate each visit every column
 * once: computing the sensitivities twice costs less than first touching a
 * large cache (on a 2-core VM, 118 MB of new pages took about 0.4 s, more than
 * one evaluation of eight loop coils at 77,000 × 12 cells).
 */
const SENS_CACHE = 4 * 1024 * 1024;

export class CellStream {
  /** Enumerated RF classes (rfClass is empty: no isochromat is stored). */
  readonly spec: RfClassSpec;
  /** Terms of combination z = (w·T + tissue)·D2 + sub: zStart[z] … zStart[z+1]−1. */
  private readonly zStart: Int32Array;
  private readonly zClass: Int32Array;
  private readonly zF: Float64Array;
  private readonly zDf: Float64Array;
  private readonly T: number;
  private readonly D2: number;

  /** A reason the cells cannot be streamed (the stored path then runs), or null. */
  static refusal(cells: IsochromatCells): string | null {
    void cells;
    return null;
  }

  /** With a B0 model: terms of entry e have classes eClass[eT0[e]] …; null without one. */
  private readonly eT0: Int32Array | null = null;
  private readonly eClass: Int32Array | null = null;
  /** With a B0 model whose classes exceed the limit: why the cells were not streamed (then spec is empty). */
  readonly tooMany: string | null = null;

  /**
   * The last fold's through-slice sensitivity terms (fold with sensitivities): columns × coils folded in the
   * moment form, the terms they kept (of `of` each), and the largest bound on a column's relative error.
   */
  sensStats = { columns: 0, terms: 0, of: 0, maxRel: 0 };
  /** Δf interpolated: columns of the last fold folded from the shift tables, and per node (the receiver filter not flat). */
  interpStats = { tableColumns: 0, nodeColumns: 0 };
  /** The last fold's tolerance for leaving out through-slice terms (0 before a fold: the estimate then keeps every nonzero term). */
  private termTol = 0;

  /** Per column: sensitivities of its nw cells (2·coils·nw numbers), cached when they fit SENS_CACHE. */
  private sensCache: Float64Array | null = null;
  private readonly px: Float64Array;
  private readonly py: Float64Array;
  private readonly pz: Float64Array;

  /**
   * Sensitivities of the cells of column `col` into out[2·(q·nw + c)]: at the
   * cell centres, the positions expandCells gives the column's isochromats.
   */
  sensOf(col: number, out: Float64Array): void {
    const sens = this.sens!, nw = this.cells.wGrid.length, n = 2 * sens.coils * nw;
    if (this.sensCache) {
      out.set(this.sensCache.subarray(col * n, (col + 1) * n));
      return;
    }
    const { uGrid, vGrid, wGrid } = this.cells, axes = this.cells.ctx.axes;
    const u = uGrid[this.cells.colA[col]!]!, v = vGrid[this.cells.colB[col]!]!;
    for (let c = 0; c < nw; c++) {
      const w = wGrid[c]!;
      this.px[c] = axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * w;
      this.py[c] = axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * w;
      this.pz[c] = axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * w;
    }
    sens.at(this.px, this.py, this.pz, nw, out);
  }

  /** With a B0 model interpolated in Δf: the nodes (then eClass is null) and the probes at exact Δf; null otherwise. */
  readonly interp: DfNodes | null = null;
  readonly probes: { cls: number; g: number; df: number; ti: number }[] = [];
  /** The interpolation's summary for report.json (null without one). */
  readonly interpReport: { order: number; stepHz: number; nodes: number; exactClassesOver: number; span: number; probes: number } | null = null;

  constructor(readonly cells: IsochromatCells, readonly sens: CellSensitivities | null = null, maxClasses = MAX_STREAM_CLASSES, interpolation?: InterpolationOptions) {
    {
      const nw = cells.wGrid.length;
      this.px = new Float64Array(nw);
      this.py = new Float64Array(nw);
      this.pz = new Float64Array(nw);
      if (sens) {
        const n = 2 * sens.coils * nw;
        if (n * cells.columns <= SENS_CACHE) {
          const all = new Float64Array(n * cells.columns), one = new Float64Array(n);
          for (let col = 0; col < cells.columns; col++) {
            this.sensOf(col, one);
            all.set(one, col * n);
          }
          this.sensCache = all;
        }
      }
    }
    const ctx = cells.ctx, T = ctx.pd.length, nw = cells.wGrid.length;
    const D2 = Math.max(1, ...ctx.assign.map((a) => a.length));
    this.T = T;
    this.D2 = D2;
    const nz = nw * T * D2;
    // combinations that occur
    const occurs = new Uint8Array(nz);
    this.fsum = new Float64Array(nz);
    this.oneTissue = new Uint8Array(cells.columns);
    this.colTi = new Int32Array(cells.columns);
    this.colFp = new Float64Array(cells.columns);
    cellPass(cells, T, D2, ctx.pd, occurs, this.fsum, this.oneTissue, this.colTi, this.colFp);
    const terms = Array.from({ length: T }, (_, ti) => Array.from({ length: D2 }, (_, sub) => (ctx.assign[ti]![sub] ? cellTerms(ctx, ti, sub) : null)));
    const index = new Map<string, number>();
    const cw: number[] = [], cdf: number[] = [], cr1: number[] = [], cr2: number[] = [];
    const zStart = new Int32Array(nz + 1);
    const zClass: number[] = [], zF: number[] = [], zDf: number[] = [];
    for (let z = 0; z < nz; z++) {
      zStart[z] = zClass.length;
      if (!occurs[z]) continue;
      const sub = z % D2, ti = Math.floor(z / D2) % T, c = Math.floor(z / (D2 * T));
      const tt = terms[ti]![sub]!;
      for (let t = 0; t < tt.f.length; t++) {
        const df = tt.df[t]!, r1 = ctx.r1[ti]!, r2 = ctx.r2[ti]!;
        const key = `${c}|${df}|${r1}|${r2}`;
        let id = index.get(key);
        if (id === undefined) {
          id = cw.length;
          index.set(key, id);
          cw.push(cells.wGrid[c]!);
          cdf.push(df);
          cr1.push(r1);
          cr2.push(r2);
        }
        zClass.push(id);
        zF.push(tt.f[t]!);
        zDf.push(df);
      }
    }
    zStart[nz] = zClass.length;
    this.zStart = zStart;
    this.zClass = Int32Array.from(zClass);
    this.zF = Float64Array.from(zF);
    this.zDf = Float64Array.from(zDf);
    const sf = (a: number[]) => {
      const x = sharedF64(a.length).subarray(0, a.length);
      x.set(a);
      return x;
    };
    if (!cells.hasB0) {
      this.spec = { rfClass: new Int32Array(0), classes: cw.length, classW: sf(cw), classDf: sf(cdf), classR1: sf(cr1), classR2: sf(cr2) };
      return;
    }
    // B0 model: each term's Δf = ((B0(r) + offset) + peak Δf) + spread Δf, in the
    // order of isochromats/index.ts expandCells, so the bits (and the classes) are
    // those of the stored isochromats.
    const ph = ctx.phantom, axes = ctx.axes, b0f = ph.b0!;
    const qb = terms.map((row) => row.map((tt) => (tt ? { q: Int32Array.from(tt.q), bin: Int32Array.from(tt.bin) } : null)));
    const ne = cells.entW.length, eT0 = new Int32Array(ne + 1);
    for (let col = 0; col < cells.columns; col++) {
      const sub = cells.colSub[col]!;
      for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
        const z = (cells.entW[e]! * T + cells.entTissue[e]!) * D2 + sub;
        eT0[e + 1] = zStart[z + 1]! - zStart[z]!;
      }
    }
    for (let e = 0; e < ne; e++) eT0[e + 1] = eT0[e + 1]! + eT0[e]!;
    // the field at every entry (cell), once
    const eB0 = new Float64Array(ne);
    for (let col = 0; col < cells.columns; col++) {
      const u = cells.uGrid[cells.colA[col]!]!, v = cells.vGrid[cells.colB[col]!]!;
      for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
        const w = cells.wGrid[cells.entW[e]!]!;
        eB0[e] = b0f(axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * w, axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * w, axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * w);
      }
    }
    // interpolation in Δf: per group (w, tissue) the range of its terms' Δf, and the nodes that would cover it
    let nodesTotal = Infinity, step = 0;
    const NG = nw * T, gLo = new Float64Array(NG).fill(Infinity), gHi = new Float64Array(NG).fill(-Infinity);
    if (interpolation && interpolation.span > 0) {
      step = stepFor(interpolation.tolerance / 16, interpolation.span);
      const zLo = new Float64Array(nz).fill(Infinity), zHi = new Float64Array(nz).fill(-Infinity);
      for (let z = 0; z < nz; z++) {
        for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
          zLo[z] = Math.min(zLo[z]!, this.zDf[t]!);
          zHi[z] = Math.max(zHi[z]!, this.zDf[t]!);
        }
      }
      for (let col = 0; col < cells.columns; col++) {
        const sub = cells.colSub[col]!;
        for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
          const c = cells.entW[e]!, ti = cells.entTissue[e]!, z = (c * T + ti) * D2 + sub, g = c * T + ti;
          if (zStart[z + 1]! === zStart[z]!) continue;
          gLo[g] = Math.min(gLo[g]!, eB0[e]! + zLo[z]!);
          gHi[g] = Math.max(gHi[g]!, eB0[e]! + zHi[z]!);
        }
      }
      // half a stencil more on each side: the fold's tables at lattice shifts around an entry's B0 (fold) read
      // Δf up to INTERP_ORDER/2 steps beyond the entries' own
      for (let g = 0; g < NG; g++) {
        if (!(gHi[g]! >= gLo[g]!)) continue;
        gLo[g] = gLo[g]! - (INTERP_ORDER / 2) * step;
        gHi[g] = gHi[g]! + (INTERP_ORDER / 2) * step;
      }
      // every group's nodes on the one lattice Δf = integer × step: nodes of the same tissue at different w then
      // share their (R2, Δf) key, and a column's time-segment sums run over the tissue's nodes, not over w × nodes
      for (let g = 0; g < NG; g++) if (gHi[g]! >= gLo[g]!) gLo[g] = Math.floor(gLo[g]! / step) * step;
      nodesTotal = 0;
      for (let g = 0; g < NG; g++) if (gHi[g]! >= gLo[g]!) nodesTotal += Math.floor((gHi[g]! - gLo[g]!) / step) + INTERP_ORDER;
      if (!Number.isFinite(nodesTotal)) nodesTotal = Infinity;
    }
    // exact classes while they are at most this many (beyond: the nodes where they are fewer)
    const exactMax = !Number.isFinite(nodesTotal) ? maxClasses : interpMinClasses === 0 ? 0 : Math.min(maxClasses, Math.max(interpMinClasses, nodesTotal));
    const eClass = new Int32Array(eT0[ne]!);
    const tidx = new TupleIndex(7, 1024), key = new Uint32Array(7);
    let over = false;
    for (let col = 0; col < cells.columns && !over; col++) {
      const sub = cells.colSub[col]!;
      for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
        const c = cells.entW[e]!, ti = cells.entTissue[e]!;
        const b0 = eB0[e]! + ctx.offsetHz;
        const tt = qb[ti]![sub]!, pk = ctx.peaks[ti]!, sdf = ctx.spreadDf[ti]!;
        key[0] = c;
        f64Words(ctx.r1[ti]!, key, 3);
        f64Words(ctx.r2[ti]!, key, 5);
        for (let j = 0; j < tt.q.length; j++) {
          f64Words(b0 + pk.df[tt.q[j]!]! + sdf[tt.bin[j]!]!, key, 1);
          eClass[eT0[e]! + j] = tidx.id(key, 0);
        }
        if (tidx.size > exactMax) {
          over = true;
          break;
        }
      }
    }
    if (over && interpolation && nodesTotal + INTERP_PROBES <= maxClasses) {
      this.interpReport = { order: INTERP_ORDER, stepHz: step, nodes: nodesTotal, exactClassesOver: exactMax, span: interpolation.span, probes: 0 };
      const gBase = new Int32Array(NG).fill(-1), gM = new Int32Array(NG), half = INTERP_ORDER / 2 - 1;
      const cw: number[] = [], cdf: number[] = [], cr1: number[] = [], cr2: number[] = [];
      for (let g = 0; g < NG; g++) {
        if (!(gHi[g]! >= gLo[g]!)) continue;
        const c = Math.floor(g / T), ti = g % T;
        gBase[g] = cw.length;
        gM[g] = Math.floor((gHi[g]! - gLo[g]!) / step);
        const k0 = Math.round(gLo[g]! / step);
        for (let k = 0; k < gM[g]! + INTERP_ORDER; k++) {
          cw.push(cells.wGrid[c]!);
          cdf.push((k0 + k - half) * step);
          cr1.push(ctx.r1[ti]!);
          cr2.push(ctx.r2[ti]!);
        }
      }
      // probes: seeded terms at their exact Δf (no weight: they only check the interpolation)
      const rnd = mulberry32(INTERP_SEED);
      for (let i = 0; i < INTERP_PROBES && ne > 0; i++) {
        const e = Math.min(ne - 1, Math.floor(rnd() * ne));
        let col = 0, hi = cells.columns;
        while (col + 1 < hi) {
          const mid = (col + hi) >> 1;
          if (cells.entStart[mid]! <= e) col = mid;
          else hi = mid;
        }
        const c = cells.entW[e]!, ti = cells.entTissue[e]!, z = (c * T + ti) * D2 + cells.colSub[col]!;
        const nt = zStart[z + 1]! - zStart[z]!, r = rnd();
        if (nt === 0) continue;
        const t = zStart[z]! + Math.min(nt - 1, Math.floor(r * nt)), df = eB0[e]! + this.zDf[t]!;
        this.probes.push({ cls: cw.length, g: c * T + ti, df, ti });
        cw.push(cells.wGrid[c]!);
        cdf.push(df);
        cr1.push(ctx.r1[ti]!);
        cr2.push(ctx.r2[ti]!);
      }
      this.interpReport.probes = this.probes.length;
      this.interp = new DfNodes(step, gLo, gBase, gM, eB0);
      this.spec = { rfClass: new Int32Array(0), classes: cw.length, classW: sf(cw), classDf: sf(cdf), classR1: sf(cr1), classR2: sf(cr2) };
      return;
    }
    if (over) {
      this.tooMany = `the phantom's B0 model gives more than ${maxClasses.toLocaleString("en")} RF classes (Δf varies per cell; the most the line factor holds for this sequence): the weights come from stored isochromats`;
      this.spec = { rfClass: new Int32Array(0), classes: 0, classW: sf([]), classDf: sf([]), classR1: sf([]), classR2: sf([]) };
      return;
    }
    const C = tidx.size;
    const classW = sharedF64(C).subarray(0, C), classDf = sharedF64(C).subarray(0, C), classR1 = sharedF64(C).subarray(0, C), classR2 = sharedF64(C).subarray(0, C);
    decodeClassKeys(tidx.keys, C, cells.wGrid, { classW, classDf, classR1, classR2 });
    this.eT0 = eT0;
    this.eClass = eClass;
    this.spec = { rfClass: new Int32Array(0), classes: C, classW, classDf, classR1, classR2 };
  }

  /** Per combination z of (w, tissue, sub-assignment): Σ |pd·fraction| of its entries, in column and entry order (cellPass). */
  private readonly fsum: Float64Array;
  private readonly oneTissue: Uint8Array;
  /** Per column, its first entry's tissue and pd·fraction (the whole column's where oneTissue: read in column order, not from the entries). */
  private readonly colTi: Int32Array;
  private readonly colFp: Float64Array;

  /**
   * Per column, 1 where it is one tissue at one fraction through every w (nw
   * entries, in w order): made once (cellPass), for the fold's passes and the estimate.
   */
  oneTissueColumns(): Uint8Array {
    return this.oneTissue;
  }

  /** Class of term t (of combination z) of entry e. */
  private classAt(e: number, z: number, t: number): number {
    return this.eClass ? this.eClass[this.eT0![e]! + t - this.zStart[z]!]! : this.zClass[t]!;
  }

  /**
   * The lattice of B0 shifts for shiftTables and shiftSamples: per group (w,
   * tissue) the range of its entries' B0 from lo[g] (on the node lattice) over
   * sM[g] + p shifts, table j of group g at slot g·NY + j (the DfNodes
   * `shift` gives an entry's shifts and weights), and per combination z the
   * lowest and highest offset of its terms (the receiver filter's flatness).
   * Null where nz·NY tables of `per` numbers would pass TABLE_DOUBLES.
   */
  private shiftLattice(ip: DfNodes, per: number) {
    const { cells, T, D2, zStart, zDf } = this, nw = cells.wGrid.length, NG = nw * T, nz = NG * D2, p = ip.p, step = ip.step, eB0 = ip.eB0;
    const lo = new Float64Array(NG).fill(Infinity), hi = new Float64Array(NG).fill(-Infinity);
    for (let e = 0; e < cells.entW.length; e++) {
      const g = cells.entW[e]! * T + cells.entTissue[e]!;
      if (eB0[e]! < lo[g]!) lo[g] = eB0[e]!;
      if (eB0[e]! > hi[g]!) hi[g] = eB0[e]!;
    }
    const sBase = new Int32Array(NG), sM = new Int32Array(NG);
    let NY = 0;
    for (let g = 0; g < NG; g++) {
      if (!(hi[g]! >= lo[g]!)) continue;
      lo[g] = Math.floor(lo[g]! / step) * step;
      sM[g] = Math.floor((hi[g]! - lo[g]!) / step);
      NY = Math.max(NY, sM[g]! + p);
    }
    if (nz * NY * per > TABLE_DOUBLES) return null;
    for (let g = 0; g < NG; g++) sBase[g] = g * NY;
    const zLo = new Float64Array(nz).fill(Infinity), zHi = new Float64Array(nz).fill(-Infinity);
    for (let z = 0; z < nz; z++) {
      for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
        zLo[z] = Math.min(zLo[z]!, zDf[t]!);
        zHi[z] = Math.max(zHi[z]!, zDf[t]!);
      }
    }
    // tables of `per` numbers made on first use: table(z, g, j) adds, for every term of z at Δf = shift j + its
    // offset, each node's f·ℓ through addNode(table, node class, f·ℓ)
    const half = p / 2 - 1, iwt = new Float64Array(p), { zF } = this;
    const lazy = (addNode: (tab: Float64Array, cl: number, fw: number) => void) => {
      const cache: (Float64Array | undefined)[] = new Array(nz * NY);
      return (z: number, g: number, j: number): Float64Array => {
        let tab = cache[z * NY + j];
        if (tab) return tab;
        tab = new Float64Array(per);
        const d = lo[g]! + (j - half) * step;
        for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
          const k0 = ip.expand(d + zDf[t]!, g, iwt);
          for (let x = 0; x < p; x++) addNode(tab, k0 + x, zF[t]! * iwt[x]!);
        }
        cache[z * NY + j] = tab;
        return tab;
      };
    };
    // per tissue: whether its groups of every w share one node lattice (the same lowest node and node count), so that
    // shift j means the same B0 for all of them (tables of a column through the slice can then be combined per j)
    const sameLattice = new Uint8Array(T);
    for (let ti = 0; ti < T; ti++) {
      let ok = nw > 0 && hi[ti]! >= lo[ti]! ? 1 : 0;
      for (let c = 1; c < nw && ok; c++) if (lo[c * T + ti] !== lo[ti] || sM[c * T + ti] !== sM[ti]) ok = 0;
      sameLattice[ti] = ok;
    }
    // the tables (from a lazy getter) of tissue ti at place sub and shift j of every w in order, to visit(c, table);
    // false where some w has no such table (no terms, or j beyond its group's shifts)
    const eachW = (table: (z: number, g: number, j: number) => Float64Array, ti: number, sub: number, j: number, visit: (c: number, tab: Float64Array) => void): boolean => {
      for (let c = 0; c < nw; c++) {
        const g = c * T + ti, z = g * D2 + sub;
        if (zStart[z + 1]! === zStart[z]! || j < 0 || j >= sM[g]! + p) return false;
        visit(c, table(z, g, j));
      }
      return true;
    };
    return { lo, hi, sBase, sM, NY, shift: new DfNodes(step, lo, sBase, sM, eB0), zLo, zHi, lazy, sameLattice, eachW };
  }

  /**
   * Δf interpolated, for one fold pass (ranks r0 … r1−1): per combination z =
   * (w, tissue, place) and lattice shift δ_j (the node lattice, over the B0 of
   * the group's entries) the (rank, segment) table Σ_t f_t·Σ_x ℓ_x(δ_j + Δf_t)·
   * G_r(node)·C_l(key), made on first use; an entry at B0 shift δ reads
   * Σ_j ℓ_j(δ)·table(z, j): the same Lagrange interpolation, now of the entry's
   * whole signal in its shift (smooth in δ as the signal is in Δf; the
   * estimate, summed per node, checks it). `column` folds a column this way
   * where the receiver filter is flat over all its entries (else false: the
   * per-node fold runs). Null where the tables would not fit TABLE_DOUBLES.
   */
  private shiftTables(ip: DfNodes, G: Float64Array, R: number, r0: number, r1: number, keyOf: Int32Array, Ck: Float64Array, L: number, tol: number) {
    const { cells, T, D2, zStart } = this, nw = cells.wGrid.length, NG = nw * T, p = ip.p, step = ip.step;
    const W = r1 - r0, WL = W * L, eB0 = ip.eB0, pd = cells.ctx.pd;
    const lat = this.shiftLattice(ip, 2 * WL);
    if (!lat) return null;
    const { lo, hi, sBase, sM, shift, zLo, zHi } = lat;
    const swt = new Float64Array(p);
    const table = lat.lazy((tab, cl, fw) => {
      const k = keyOf[cl]!;
      for (let r = 0; r < W; r++) {
        const gr = G[2 * (cl * R + r0 + r)]! * fw, gi = G[2 * (cl * R + r0 + r) + 1]! * fw;
        for (let l = 0; l < L; l++) {
          const cr = Ck[2 * (k * L + l)]!, ci = Ck[2 * (k * L + l) + 1]!, o = 2 * (r * L + l);
          tab[o] = tab[o]! + (gr * cr - gi * ci);
          tab[o + 1] = tab[o + 1]! + (gr * ci + gi * cr);
        }
      }
    });
    const colT = new Float64Array(2 * WL * nw), usedW = new Uint8Array(nw), margin = (p / 2 + 1) * step;
    // One uniform coil: a column of one tissue at one fraction through every w, with one B0 through the slice (a B0
    // model with no part along the slice), reads the tables summed over w, per (tissue, place, absolute shift J),
    // made on first use (null where a w's group has no table at J: the per-entry sum runs).
    const oneTissue = this.oneTissueColumns(), { colTi, colFp } = this, lat0 = new Int32Array(NG);
    let jMin = Infinity, jMax = -Infinity;
    for (let g = 0; g < NG; g++) {
      if (!(hi[g]! >= lo[g]!)) continue;
      lat0[g] = Math.round(lo[g]! / step);
      jMin = Math.min(jMin, lat0[g]!);
      jMax = Math.max(jMax, lat0[g]! + sM[g]! + p);
    }
    const NJ = Number.isFinite(jMin) ? jMax - jMin : 0, useW = T * D2 * NJ * 2 * WL <= TABLE_DOUBLES;
    const wtabs: (Float64Array | null | undefined)[] = new Array(useW ? T * D2 * NJ : 0);
    const wsum = (ti: number, sub: number, J: number): Float64Array | null => {
      const key = (ti * D2 + sub) * NJ + (J - jMin);
      const have = wtabs[key];
      if (have !== undefined) return have;
      let out: Float64Array | null = new Float64Array(2 * WL);
      for (let c = 0; c < nw && out; c++) {
        const g = c * T + ti, z = g * D2 + sub, j = J - lat0[g]!;
        if (zStart[z + 1]! === zStart[z]! || !(hi[g]! >= lo[g]!) || j < 0 || j >= sM[g]! + p) {
          out = null;
          break;
        }
        const tab = table(z, g, j);
        for (let i = 0; i < 2 * WL; i++) out[i] = out[i]! + tab[i]!;
      }
      wtabs[key] = out;
      return out;
    };
    // With sensitivities: a column of one tissue at one fraction through every w, at one B0 through the slice, where the
    // tissue's groups share one node lattice (sameLattice), reads moment tables M_p(J) = Σ_c ψ_p(c)·table(c, J) on the
    // fold's through-slice basis ψ (complete: table(c, J) = Σ_p ψ_p(c)·M_p(J)), made on first use per (tissue, place,
    // shift J) with their norms; then coil q adds Σ_p s_qp·fp·Σ_x ℓ_x·M_p(J0 + x) (s_qp its sensitivity's moments) over
    // the terms keepTerms keeps within tol, as the fold does without B0: a few moments instead of every w, per coil.
    const { NY, sameLattice } = lat;
    let psi: Float64Array | null = null;
    const momTabs = new Map<number, { mom: Float64Array; norm: Float64Array } | null>(), stack = new Float64Array(2 * WL * nw);
    const momTable = (ti: number, sub: number, j: number): { mom: Float64Array; norm: Float64Array } | null => {
      const key = (ti * D2 + sub) * NY + j;
      let m = momTabs.get(key);
      if (m !== undefined) return m;
      m = null;
      if (lat.eachW(table, ti, sub, j, (c, tab) => stack.set(tab, 2 * WL * c))) {
        m = { mom: new Float64Array(2 * WL * nw), norm: new Float64Array(nw) };
        sliceMoments(psi!, nw, stack, 2 * WL, m.mom, m.norm);
      }
      momTabs.set(key, m);
      return m;
    };
    const mts: ({ mom: Float64Array; norm: Float64Array } | null)[] = new Array(p).fill(null);
    // scratch sized for the coil count on first use: the sensitivity's moments, each term's bound, the moments kept
    let smom = new Float64Array(0), bound = new Float64Array(0), eTerm = new Float64Array(0), drop = new Float64Array(1), need = new Uint8Array(0), colM = new Float64Array(0);
    let gams: Float64Array[] = [], orders: Int32Array[] = [], nks = new Int32Array(0);
    const momentColumn = (col: number, sub: number, e0: number, S: Float64Array, coils: number, pr0: number, pi0: number, XB: Float64Array, ob: number): boolean => {
      const ti = colTi[col]!;
      for (let e = e0 + 1; e < e0 + nw; e++) if (eB0[e] !== eB0[e0]) return false;
      psi ??= throughSliceBasis(cells.wGrid);
      if (smom.length !== 2 * coils * nw) {
        smom = new Float64Array(2 * coils * nw);
        bound = new Float64Array(nw);
        eTerm = new Float64Array(nw);
        need = new Uint8Array(nw);
        colM = new Float64Array(2 * WL * nw);
        gams = Array.from({ length: coils }, () => new Float64Array(2 * nw));
        orders = Array.from({ length: coils }, () => new Int32Array(nw));
        nks = new Int32Array(coils);
      }
      const j0 = shift.expand(eB0[e0]!, ti, swt) - sBase[ti]!;
      for (let x = 0; x < p; x++) {
        mts[x] = momTable(ti, sub, j0 + x);
        if (!mts[x]) return false;
      }
      const fp = colFp[col]!;
      // ‖fp·Σ_x ℓ_x·M_p(J0 + x)‖ ≤ |fp|·Σ_x |ℓ_x|·‖M_p(J0 + x)‖: each term's bound for keepTerms
      for (let q = 0; q < nw; q++) {
        let b = 0;
        for (let x = 0; x < p; x++) b += Math.abs(swt[x]!) * mts[x]!.norm[q]!;
        bound[q] = Math.abs(fp) * b;
      }
      projectThroughSlice(psi, S, coils, nw, smom);
      need.fill(0);
      const st = this.sensStats;
      for (let q = 0; q < coils; q++) {
        const e2 = coilTerms(smom, q, nw, pr0, pi0, bound, gams[q]!, eTerm);
        const nk = keepTerms(eTerm, nw, tol * Math.sqrt(e2), orders[q]!, drop);
        nks[q] = nk;
        for (let i = 0; i < nk; i++) need[orders[q]![i]!] = 1;
        st.columns++;
        st.terms += nk;
        if (e2 > 0) st.maxRel = Math.max(st.maxRel, drop[0]! / Math.sqrt(e2));
      }
      // the interpolated moments the coils keep
      for (let q = 0; q < nw; q++) {
        if (need[q] === 0) continue;
        const o = 2 * WL * q;
        colM.fill(0, o, o + 2 * WL);
        for (let x = 0; x < p; x++) {
          const f = fp * swt[x]!, m = mts[x]!.mom;
          for (let i = 0; i < 2 * WL; i++) colM[o + i] = colM[o + i]! + f * m[o + i]!;
        }
      }
      for (let q = 0; q < coils; q++) if (nks[q]! > 0) addMoments(XB, ob + 2 * q * L, 2 * coils * L, W, L, colM, gams[q]!, orders[q]!, nks[q]!, 2 * WL);
      return true;
    };
    return {
      column: (col: number, sub: number, u: number, filt: boolean, fRead: number, bw: number, S: Float64Array, hasSens: boolean, coils: number,
        pr0: number, pi0: number, XB: Float64Array, ob: number): boolean => {
        const e0 = cells.entStart[col]!, e1 = cells.entStart[col + 1]!;
        if (filt) {
          for (let e = e0; e < e1; e++) {
            const z = (cells.entW[e]! * T + cells.entTissue[e]!) * D2 + sub;
            if (zStart[z + 1]! > zStart[z]! && !flatFor(fRead * u, eB0[e]! + zLo[z]! - margin, eB0[e]! + zHi[z]! + margin, bw)) return false;
          }
        }
        if (hasSens && e1 - e0 === nw && oneTissue[col] === 1 && sameLattice[colTi[col]!] === 1 && momentColumn(col, sub, e0, S, coils, pr0, pi0, XB, ob)) return true;
        let summed = false;
        if (!hasSens && useW && oneTissue[col] === 1 && e1 - e0 === nw) {
          let same = true;
          for (let e = e0 + 1; e < e1 && same; e++) same = eB0[e] === eB0[e0];
          const ti = colTi[col]!, g0 = ti;
          if (same && hi[g0]! >= lo[g0]!) {
            const J0 = lat0[g0]! + shift.expand(eB0[e0]!, g0, swt) - sBase[g0]!;
            colT.fill(0, 0, 2 * WL);
            summed = true;
            for (let x = 0; x < p && summed; x++) {
              const tab = wsum(ti, sub, J0 + x), f = colFp[col]! * swt[x]!;
              if (!tab) summed = false;
              else for (let i = 0; i < 2 * WL; i++) colT[i] = colT[i]! + f * tab[i]!;
            }
            if (summed) usedW[0] = 1;
          }
        }
        // per w: Σ over its entries of pd·fraction × the interpolated table
        for (let e = summed ? e1 : e0; e < e1; e++) {
          const c = cells.entW[e]!, ti = cells.entTissue[e]!, g = c * T + ti, z = g * D2 + sub;
          if (zStart[z + 1]! === zStart[z]!) continue;
          const fp = pd[ti]! * cells.entFrac[e]!, j0 = shift.expand(eB0[e]!, g, swt) - sBase[g]!, o = hasSens ? 2 * WL * c : 0;
          if (usedW[hasSens ? c : 0] === 0) {
            usedW[hasSens ? c : 0] = 1;
            colT.fill(0, o, o + 2 * WL);
          }
          for (let x = 0; x < p; x++) {
            const tab = table(z, g, j0 + x), f = fp * swt[x]!;
            for (let i = 0; i < 2 * WL; i++) colT[o + i] = colT[o + i]! + f * tab[i]!;
          }
        }
        // times each coil's sensitivity at that w and the column's pre-phase, into the grid
        for (let c = 0; c < (hasSens ? nw : 1); c++) {
          if (usedW[c] === 0) continue;
          usedW[c] = 0;
          const o = 2 * WL * c;
          for (let q = 0; q < coils; q++) {
            const sr0 = hasSens ? S[2 * (q * nw + c)]! : 1, si0 = hasSens ? S[2 * (q * nw + c) + 1]! : 0;
            const sr = sr0 * pr0 - si0 * pi0, si = sr0 * pi0 + si0 * pr0;
            for (let r = 0; r < W; r++) {
              for (let l = 0; l < L; l++) {
                const a = o + 2 * (r * L + l), zr = colT[a]!, zi = colT[a + 1]!, x = ob + 2 * ((r * coils + q) * L + l);
                XB[x] = XB[x]! + (zr * sr - zi * si);
                XB[x + 1] = XB[x + 1]! + (zr * si + zi * sr);
              }
            }
          }
        }
        return true;
      },
    };
  }

  /**
   * Δf interpolated, the estimate's twin of shiftTables: per combination z and
   * lattice shift δ_j the estimate's samples Σ_t f_t·Σ_x ℓ_x(δ_j + Δf_t)·
   * Pr_node(row(s))·dec_key(s) (the exact per-node states and decays), made on
   * first use; `column` writes a column's samples per coil into colv (layout of
   * estimateOver's addSamples) where the receiver filter is flat over all its
   * entries, else returns false (the per-node sums run).
   */
  private shiftSamples(ip: DfNodes, setup: Parameters<ColumnVisitor>[2]) {
    const { cells, T, D2, zStart } = this, nw = cells.wGrid.length, p = ip.p, step = ip.step;
    const { S: NS, PJ, Pr, dec, keyOf, filter } = setup, NR = setup.NR, eB0 = ip.eB0, pd = cells.ctx.pd;
    const lat = this.shiftLattice(ip, 2 * NS);
    if (!lat) return null;
    const { sBase, shift, zLo, zHi } = lat;
    const swt = new Float64Array(p);
    const table = lat.lazy((tab, cl, fw) => {
      const k = keyOf[cl]!;
      for (let s = 0; s < NS; s++) {
        const w = Math.floor(s / PJ), pr = Pr[2 * (cl * NR + w)]! * fw, pi = Pr[2 * (cl * NR + w) + 1]! * fw;
        const dr = dec[2 * (k * NS + s)]!, di = dec[2 * (k * NS + s) + 1]!;
        tab[2 * s] = tab[2 * s]! + (pr * dr - pi * di);
        tab[2 * s + 1] = tab[2 * s + 1]! + (pr * di + pi * dr);
      }
    });
    const colY = new Float64Array(2 * NS * nw), usedW = new Uint8Array(nw), margin = (p / 2 + 1) * step;
    // One uniform coil: a column of one tissue at one fraction through every w, at one B0 through the slice, where the
    // tissue's groups share one node lattice, reads the tables summed over w per (tissue, place, shift), made on first use
    const oneTissue = this.oneTissueColumns(), { colTi, colFp } = this, { NY, sameLattice } = lat;
    const sums = new Map<number, Float64Array | null>(), tabs: (Float64Array | null)[] = new Array(p).fill(null);
    const wsum = (ti: number, sub: number, j: number): Float64Array | null => {
      const key = (ti * D2 + sub) * NY + j;
      let out = sums.get(key);
      if (out !== undefined) return out;
      const acc = new Float64Array(2 * NS);
      out = lat.eachW(table, ti, sub, j, (_c, tab) => {
        for (let i = 0; i < 2 * NS; i++) acc[i] = acc[i]! + tab[i]!;
      }) ? acc : null;
      sums.set(key, out);
      return out;
    };
    const summedColumn = (col: number, sub: number, e0: number, colv: Float64Array): boolean => {
      for (let e = e0 + 1; e < e0 + nw; e++) if (eB0[e] !== eB0[e0]) return false;
      const ti = colTi[col]!, j0 = shift.expand(eB0[e0]!, ti, swt) - sBase[ti]!;
      for (let x = 0; x < p; x++) {
        tabs[x] = wsum(ti, sub, j0 + x);
        if (!tabs[x]) return false;
      }
      colv.fill(0);
      const fp = colFp[col]!;
      for (let x = 0; x < p; x++) {
        const tab = tabs[x]!, f = fp * swt[x]!;
        for (let i = 0; i < 2 * NS; i++) colv[i] = colv[i]! + f * tab[i]!;
      }
      return true;
    };
    return {
      column: (col: number, sub: number, u: number, S: Float64Array | null, coils: number, colv: Float64Array): boolean => {
        const e0 = cells.entStart[col]!, e1 = cells.entStart[col + 1]!;
        if (filter) {
          for (let e = e0; e < e1; e++) {
            const z = (cells.entW[e]! * T + cells.entTissue[e]!) * D2 + sub;
            if (zStart[z + 1]! > zStart[z]! && !flatFor(filter.fRead * u, eB0[e]! + zLo[z]! - margin, eB0[e]! + zHi[z]! + margin, filter.bw)) return false;
          }
        }
        if (!S && e1 - e0 === nw && oneTissue[col] === 1 && sameLattice[colTi[col]!] === 1 && summedColumn(col, sub, e0, colv)) return true;
        for (let e = e0; e < e1; e++) {
          const c = cells.entW[e]!, ti = cells.entTissue[e]!, g = c * T + ti, z = g * D2 + sub;
          if (zStart[z + 1]! === zStart[z]!) continue;
          const fp = pd[ti]! * cells.entFrac[e]!, j0 = shift.expand(eB0[e]!, g, swt) - sBase[g]!, cw = S ? c : 0, o = 2 * NS * cw;
          if (usedW[cw] === 0) {
            usedW[cw] = 1;
            colY.fill(0, o, o + 2 * NS);
          }
          for (let x = 0; x < p; x++) {
            const tab = table(z, g, j0 + x), f = fp * swt[x]!;
            for (let i = 0; i < 2 * NS; i++) colY[o + i] = colY[o + i]! + f * tab[i]!;
          }
        }
        colv.fill(0);
        for (let c = 0; c < (S ? nw : 1); c++) {
          if (usedW[c] === 0) continue;
          usedW[c] = 0;
          const o = 2 * NS * c;
          for (let q = 0; q < coils; q++) {
            const sr = S ? S[2 * (q * nw + c)]! : 1, si = S ? S[2 * (q * nw + c) + 1]! : 0;
            for (let s = 0; s < NS; s++) {
              const zr = colY[o + 2 * s]!, zi = colY[o + 2 * s + 1]!, x = 2 * (q * NS + s);
              colv[x] = colv[x]! + (zr * sr - zi * si);
              colv[x + 1] = colv[x + 1]! + (zr * si + zi * sr);
            }
          }
        }
        return true;
      },
    };
  }

  /**
   * Δf interpolated: entry e's terms (combination z) summed onto the nodes of its
   * group g: wc[j] += f·ℓ(Δf) for node j (class gBase[g] + j); returns the range
   * of j touched to range[0] (inclusive) and range[1] (exclusive). The caller
   * reads and clears wc over that range.
   */
  private entryNodes(e: number, z: number, g: number, wc: Float64Array, iwt: Float64Array, range: Int32Array): void {
    const ip = this.interp!, base = ip.gBase[g]!, eb = ip.eB0[e]!, p = ip.p, zDf = this.zDf, zF = this.zF;
    let lo = 0x7fffffff, hi = -1;
    for (let t = this.zStart[z]!; t < this.zStart[z + 1]!; t++) {
      const j0 = ip.expand(eb + zDf[t]!, g, iwt) - base, f = zF[t]!;
      for (let x = 0; x < p; x++) wc[j0 + x] = wc[j0 + x]! + f * iwt[x]!;
      if (j0 < lo) lo = j0;
      if (j0 + p > hi) hi = j0 + p;
    }
    range[0] = lo;
    range[1] = hi;
  }

  /** The most nodes of one group (the size of entryNodes' wc). */
  private maxGroupNodes(): number {
    const ip = this.interp;
    let m = 0;
    if (ip) for (let g = 0; g < ip.gBase.length; g++) if (ip.gBase[g]! >= 0) m = Math.max(m, ip.gM[g]! + ip.p);
    return m;
  }

  /**
   * The interpolation's error on the probes, after the history: per probe, over
   * every readout n of `lines` and 8 samples j across the readout, the signal
   * h(n, j) = P_c(n)·exp(−t_j·(R2 + i2πΔf)) at its exact Δf against Σ_i ℓ_i·h of
   * its nodes, ‖difference‖ / the largest ‖h‖ of the nodes of its tissue; the
   * largest over the probes (0 without interpolation).
   */
  interpolationError(P: Float64Array, C: number, lines: readonly number[], ns: number, dwell: number): number {
    const ip = this.interp;
    if (!ip || this.probes.length === 0) return 0;
    const { classDf, classR2 } = this.spec, T = this.T, J = Math.min(8, ns);
    const tj = Float64Array.from({ length: J }, (_, i) => (J > 1 ? Math.round((i * (ns - 1)) / (J - 1)) : 0) * dwell);
    // per tissue: the largest ‖h‖ of its nodes (|h(n, j)| = |P_c(n)|·exp(−t_j·R2))
    const ref = new Float64Array(T);
    for (let g = 0; g < ip.gBase.length; g++) {
      if (ip.gBase[g]! < 0) continue;
      const ti = g % T;
      for (let k = ip.gBase[g]!; k < ip.gBase[g]! + ip.gM[g]! + ip.p; k++) {
        let pn = 0, en = 0;
        for (const n of lines) pn += P[2 * (n * C + k)]! ** 2 + P[2 * (n * C + k) + 1]! ** 2;
        for (let j = 0; j < J; j++) en += Math.exp(-2 * tj[j]! * classR2[k]!);
        ref[ti] = Math.max(ref[ti]!, Math.sqrt(pn * en));
      }
    }
    // exp(−t_j·(R2 + i2πΔf)) of the probe (slot 0) and of its nodes (slots 1 … p), per sample: made once per probe, not per line
    const fac = new Float64Array(2 * (ip.p + 1) * J);
    const decay = (slot: number, df: number, r2: number) => {
      for (let j = 0; j < J; j++) {
        const a = Math.exp(-tj[j]! * r2), th = -2 * Math.PI * df * tj[j]!, o = 2 * (slot * J + j);
        fac[o] = a * Math.cos(th);
        fac[o + 1] = a * Math.sin(th);
      }
    };
    const wt = new Float64Array(ip.p);
    let worst = 0;
    for (const pr of this.probes) {
      const k0 = ip.expand(pr.df, pr.g, wt);
      decay(0, pr.df, classR2[pr.cls]!);
      for (let x = 0; x < ip.p; x++) decay(x + 1, classDf[k0 + x]!, classR2[k0 + x]!);
      let d2 = 0;
      for (const n of lines) {
        const xr = P[2 * (n * C + pr.cls)]!, xi = P[2 * (n * C + pr.cls) + 1]!;
        for (let j = 0; j < J; j++) {
          const er = fac[2 * j]!, ei = fac[2 * j + 1]!;
          let hr = xr * er - xi * ei, hi = xr * ei + xi * er;
          for (let x = 0; x < ip.p; x++) {
            const k = k0 + x, o = 2 * ((x + 1) * J + j), fr = fac[o]!, fi = fac[o + 1]!;
            const yr = P[2 * (n * C + k)]! * wt[x]!, yi = P[2 * (n * C + k) + 1]! * wt[x]!;
            hr -= yr * fr - yi * fi;
            hi -= yr * fi + yi * fr;
          }
          d2 += hr * hr + hi * hi;
        }
      }
      if (ref[pr.ti]! > 0) worst = Math.max(worst, Math.sqrt(d2) / ref[pr.ti]!);
    }
    return worst;
  }

  /** Each class's through-slice index and magnetization Σ|m0|. */
  classInfo(): { classIw: Int32Array; mass: Float64Array } {
    const { cells, T, D2, zStart, zClass, zF } = this;
    const C = this.spec.classes, classIw = new Int32Array(C).fill(-1), mass = new Float64Array(C);
    const nw = cells.wGrid.length, pd = cells.ctx.pd;
    const ip = this.interp;
    if (ip) {
      // every node and probe belongs to its w; the nodes' mass is Σ |pd·fraction·f·weight| of the terms around them
      for (let g = 0; g < ip.gBase.length; g++) {
        if (ip.gBase[g]! < 0) continue;
        classIw.fill(Math.floor(g / T), ip.gBase[g]!, ip.gBase[g]! + ip.gM[g]! + ip.p);
      }
      for (const pr of this.probes) classIw[pr.cls] = Math.floor(pr.g / T);
      const nodes = this.maxGroupNodes(), wt = new Float64Array(ip.p), wc = new Float64Array(nodes), range = new Int32Array(2);
      // An entry's node weights depend on its tissue and sub-position (its terms), its B0 and its group's lattice (lowest
      // node and node count), not on its w: the entries of one column through the slice (one B0, groups spanning the
      // same B0) share them. The last weights of each tissue are kept and reused where all of these match (the same
      // numbers as made anew; each node belongs to one w, so its sum runs in the same order).
      const keepWc = new Float64Array(T * nodes), keepLo = new Int32Array(T), keepHi = new Int32Array(T);
      const keyB0 = new Float64Array(T).fill(NaN), keyLo = new Float64Array(T), keyM = new Int32Array(T), keySub = new Int32Array(T).fill(-1);
      for (let col = 0; col < cells.columns; col++) {
        const sub = cells.colSub[col]!;
        for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
          const ti = cells.entTissue[e]!, c = cells.entW[e]!, z = (c * T + ti) * D2 + sub, a = Math.abs(pd[ti]! * cells.entFrac[e]!), g = c * T + ti;
          const base = ip.gBase[g]!, o = ti * nodes;
          if (keySub[ti] === sub && keyB0[ti] === ip.eB0[e] && keyLo[ti] === ip.gLo[g] && keyM[ti] === ip.gM[g]) {
            for (let j = keepLo[ti]!; j < keepHi[ti]!; j++) mass[base + j] = mass[base + j]! + a * Math.abs(keepWc[o + j]!);
            continue;
          }
          this.entryNodes(e, z, g, wc, wt, range);
          keySub[ti] = sub;
          keyB0[ti] = ip.eB0[e]!;
          keyLo[ti] = ip.gLo[g]!;
          keyM[ti] = ip.gM[g]!;
          keepLo[ti] = range[0]!;
          keepHi[ti] = range[1]!;
          for (let j = range[0]!; j < range[1]!; j++) {
            mass[base + j] = mass[base + j]! + a * Math.abs(wc[j]!);
            keepWc[o + j] = wc[j]!;
            wc[j] = 0;
          }
        }
      }
      return { classIw, mass };
    }
    if (this.eClass) {
      for (let col = 0; col < cells.columns; col++) {
        const sub = cells.colSub[col]!;
        for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
          const ti = cells.entTissue[e]!, z = (cells.entW[e]! * T + ti) * D2 + sub, a = Math.abs(pd[ti]! * cells.entFrac[e]!);
          for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
            const k = this.classAt(e, z, t);
            classIw[k] = cells.entW[e]!;
            mass[k] = mass[k]! + a * Math.abs(zF[t]!);
          }
        }
      }
      return { classIw, mass };
    }
    const fsum = this.fsum;
    for (let z = 0; z < fsum.length; z++) {
      const c = Math.floor(z / (D2 * T));
      for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
        const k = zClass[t]!;
        classIw[k] = c;
        mass[k] = mass[k]! + fsum[z]! * Math.abs(zF[t]!);
      }
    }
    return { classIw, mass };
  }

  /**
   * One pass over the cells for ranks r0 … r1−1: per column, coil and
   * (R2, Δf) key the rank weights Σ S_q·m0·G_r(c), times the pre-phases and
   * the receiver filter, folded into X[((r − r0)·coils + q)·L + l] with the
   * segment coefficients C_l(key) (as fast.ts foldPass does for stored
   * isochromats). S_q is the coil's sensitivity at the cell (per column and
   * through-slice index; 1 for one uniform coil).
   */
  fold(
    plan: EnginePlan, G: Float64Array, R: number, r0: number, r1: number, keyOf: Int32Array, keyDf: number[], K: number,
    preU: Float64Array, preV: Float64Array, Mu: number, Mv: number, fRead: number, bw: number, L: number, Ck: Float64Array, XB0: Float64Array, NX: number,
    tol = 0, onColumn?: (col: number, S: Float64Array | null, mom: Float64Array | null) => void, sensSource?: { fill: ((col: number, S: Float64Array | null, mom: Float64Array | null) => boolean) | null },
  ): ColumnFolder {
    void XB0;
    const coils = plan.coils;
    if (plan.sens || (coils !== 1 && !this.sens) || (this.sens && this.sens.coils !== coils)) throw new Error("CellStream.fold: sensitivities must come from the stream");
    const { cells, T, D2, zStart, zClass, zF } = this;
    const W = r1 - r0, filt = plan.receiverFilter, pd = cells.ctx.pd, uGrid = cells.uGrid;
    const nw = cells.wGrid.length, hasSens = this.sens !== null;
    // per term: its key and f·G_r(class) for the ranks of this pass
    const ip = this.interp, iwt = new Float64Array(ip ? ip.p : 0), wc = new Float64Array(this.maxGroupNodes()), range = new Int32Array(2);
    const lat = ip ? this.shiftTables(ip, G, R, r0, r1, keyOf, Ck, L, tol) : null;
    const counted = ip ? new Uint8Array(cells.columns) : null;
    this.interpStats = { tableColumns: 0, nodeColumns: 0 };
    const b0 = this.eClass !== null || ip !== null, nt0 = b0 ? 0 : zClass.length, tKey = new Int32Array(nt0), tVal = new Float64Array(2 * W * nt0);
    for (let t = 0; t < nt0; t++) {
      const c = zClass[t]!, f = zF[t]!;
      tKey[t] = keyOf[c]!;
      for (let r = 0; r < W; r++) {
        tVal[2 * (t * W + r)] = G[2 * (c * R + r0 + r)]! * f;
        tVal[2 * (t * W + r) + 1] = G[2 * (c * R + r0 + r) + 1]! * f;
      }
    }
    const CW = coils * W;
    const acc = new Float64Array(2 * K * CW);
    const touched = new Int32Array(K), seen = new Uint8Array(K);
    // A column of one tissue at one fraction through every w (most columns) is
    // pd·fraction times that tissue's terms already in (rank, segment) space
    // where the receiver filter is flat (1) for all its keys: tabulated once per
    // (tissue, place in the voxel) — summed over w for one uniform coil, per w
    // with sensitivities (they vary through the slice).
    const WL = W * L, perW = hasSens ? nw : 1;
    const full: { keys: Int32Array; dfLo: number; dfHi: number; rl: Float64Array; mom: Float64Array | null; momNorm: Float64Array | null }[] = [];
    const complete = new Uint8Array(T * D2);
    // With sensitivities: the table's through-slice moments M_p = Σ_c ψ_p(c)·rl[c] on an
    // orthonormal basis ψ of discrete polynomials in w (complete: rl[c] = Σ_p ψ_p(c)·M_p),
    // so that a column's Σ_c S_q(c)·rl[c] = Σ_p s_p·M_p with s_p = Σ_c ψ_p(c)·S_q(c).
    const psi = hasSens ? throughSliceBasis(cells.wGrid) : null;
    for (let ti = 0; ti < T && !b0; ti++) {
      for (let sub = 0; sub < D2; sub++) {
        let ok = 1;
        const keySet = new Set<number>();
        const rl = new Float64Array(2 * WL * perW);
        for (let c = 0; c < nw; c++) {
          const z = (c * T + ti) * D2 + sub;
          if (zStart[z + 1]! === zStart[z]!) ok = 0;
          const o = hasSens ? 2 * WL * c : 0;
          for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
            const k = tKey[t]!;
            keySet.add(k);
            for (let r = 0; r < W; r++) {
              const zr = tVal[2 * (t * W + r)]!, zi = tVal[2 * (t * W + r) + 1]!;
              for (let l = 0; l < L; l++) {
                const cr = Ck[2 * (k * L + l)]!, ci = Ck[2 * (k * L + l) + 1]!, x = o + 2 * (r * L + l);
                rl[x] = rl[x]! + (zr * cr - zi * ci);
                rl[x + 1] = rl[x + 1]! + (zr * ci + zi * cr);
              }
            }
          }
        }
        complete[ti * D2 + sub] = ok;
        let mom: Float64Array | null = null, momNorm: Float64Array | null = null;
        if (psi && ok) {
          mom = new Float64Array(2 * nw * WL);
          momNorm = new Float64Array(nw);
          sliceMoments(psi, nw, rl, 2 * WL, mom, momNorm);
        }
        const keys = Int32Array.from(keySet), [dfLo, dfHi] = dfRange(keys, keyDf);
        full.push({ keys, dfLo, dfHi, rl, mom, momNorm });
      }
    }
    const S = new Float64Array(2 * coils * nw).fill(0);
    if (!hasSens) for (let c = 0; c < nw; c++) S[2 * c] = 1;
    const gam = new Float64Array(2 * Math.max(nw, 1)), eTerm = new Float64Array(nw), order = new Int32Array(nw), drop = new Float64Array(1), sAll = new Float64Array(2 * coils * nw);
    const scratch = { gTi: new Int32Array(T), wgt: new Float64Array(T * nw), ws: new Float64Array(2 * coils * nw), mom: new Float64Array(2 * coils * nw), gam, eTerm, order, drop };
    this.sensStats = { columns: 0, terms: 0, of: nw, maxRel: 0 };
    this.termTol = tol;
    // with sensitivities, a column of one tissue folds every coil's moment sums on the SIMD kernel where it runs
    const fm = hasSens ? FoldMoments.make(full.map((f) => f.mom), coils, nw, W, L, plan.wasm) : null;
    const oneTissue = this.oneTissueColumns(), { colTi, colFp } = this;
    return (c0, c1, aBase, XB, track) => {
    for (let col = c0; col < c1; col++) {
      const sub = cells.colSub[col]!;
      let nt = 0;
      const e0 = cells.entStart[col]!, e1 = cells.entStart[col + 1]!;
      let uniform = oneTissue[col] === 1;
      if (uniform) uniform = complete[colTi[col]! * D2 + sub] === 1;
      const a = cells.colA[col]!, b = cells.colB[col]!;
      const ur = preU[2 * a]!, ui = preU[2 * a + 1]!, vr = preV[2 * b]!, vi = preV[2 * b + 1]!;
      const pr0 = ur * vr - ui * vi, pi0 = ur * vi + ui * vr;
      const p = 2 * ((a % Mu - aBase) * Mv + (b % Mv));
      const u = uGrid[a]!;
      // a column of one tissue through the slice: every coil's sensitivity on the basis ψ, s_p = Σ_c ψ_p(c)·S_q(c)
      // at sAll[2·(q·nw + p)] (the estimate's column sums use them too)
      const mom = hasSens && uniform ? sAll : null;
      // such a column where the receiver filter is flat over its table's keys uses the moments alone
      const tab = uniform ? full[colTi[col]! * D2 + sub]! : null;
      const flat = tab !== null && (!filt || flatFor(fRead * u, tab.dfLo, tab.dfHi, bw));
      let sGiven = true;
      if (hasSens) {
        // evaluated ahead (by a helper thread, with their moments) where the caller has them: then only what this
        // column reads is copied (the moments alone for a flat column of one tissue; its sensitivities are not read)
        if (!sensSource?.fill?.(col, flat && mom ? null : S, mom)) {
          this.sensOf(col, S);
          if (mom) projectThroughSlice(psi!, S, coils, nw, mom);
        } else sGiven = !(flat && mom);
      }
      // the estimate gets the sensitivities where they were copied (it evaluates them itself where it needs them and they were not)
      if (onColumn) onColumn(col, sGiven ? S : null, mom);
      if (tab) {
        const ti = colTi[col]!, fp = colFp[col]!;
        if (flat) {
          const sr = pr0 * fp, si = pi0 * fp, rl = tab.rl;
          // the SIMD kernel writes the position's whole run (below); the other sums are added into it
          if (track && !(hasSens && fm)) openPosition(track, XB, p >> 1, NX);
          for (let q = 0; q < coils; q++) {
            if (hasSens) {
              const mt = tab.mom!, momNorm = tab.momNorm!;
              // the terms of least |s_p|·‖M_p‖ left out while their sum stays within tol × the root sum
              // of squares of all of them (a bound on the column's error)
              const e2 = coilTerms(mom!, q, nw, sr, si, momNorm, gam, eTerm);
              const nk = keepTerms(eTerm, nw, tol * Math.sqrt(e2), order, drop);
              // every coil's sums at once on the SIMD kernel (below), else this coil's now
              if (fm) fm.setTerms(q, ti * D2 + sub, gam, order, nk);
              else addMoments(XB, p * NX + 2 * q * L, 2 * coils * L, W, L, mt, gam, order, nk, 2 * WL);
              const st = this.sensStats;
              st.columns++;
              st.terms += nk;
              if (e2 > 0) st.maxRel = Math.max(st.maxRel, drop[0]! / Math.sqrt(e2));
            } else {
              for (let r = 0; r < W; r++) {
                const ob = p * NX + 2 * (r * coils + q) * L;
                for (let l = 0; l < L; l++) {
                  const x = r * L + l, zr = rl[2 * x]!, zi = rl[2 * x + 1]!, o = ob + 2 * l;
                  XB[o] = XB[o]! + (zr * sr - zi * si);
                  XB[o + 1] = XB[o + 1]! + (zr * si + zi * sr);
                }
              }
            }
          }
          if (hasSens && fm) {
            if (track && track.written[p >> 1] === 0) {
              fm.storeInto(XB, p * NX);
              track.written[p >> 1] = 1;
            } else fm.addInto(XB, p * NX);
          }
          continue;
        }
      }
      if (track) openPosition(track, XB, p >> 1, NX);
      if (!uniform && hasSens && this.foldMixed(col, sub, u, full, psi!, S, pr0, pi0, p * NX, NX, coils, W, L, tol, filt, fRead, bw, keyDf, XB, scratch)) continue;
      // Δf interpolated, the receiver filter flat over every entry's Δf: each entry is its (w, tissue, place)'s
      // (rank, segment) tables at the lattice shifts around its B0, weighted by the Lagrange polynomials
      // (each column counted once: one coil folds in two passes)
      if (lat && lat.column(col, sub, u, filt, fRead, bw, S, hasSens, coils, pr0, pi0, XB, p * NX)) {
        if (counted![col] === 0) {
          counted![col] = 1;
          this.interpStats.tableColumns++;
        }
        continue;
      }
      if (ip && counted![col] === 0) {
        counted![col] = 1;
        this.interpStats.nodeColumns++;
      }
      for (let e = e0; e < e1; e++) {
        const ti = cells.entTissue[e]!, c = cells.entW[e]!, z = (c * T + ti) * D2 + sub, fp = pd[ti]! * cells.entFrac[e]!;
        if (ip) {
          // Δf interpolated: the entry's terms summed onto its group's nodes (each node an isochromat of weight wc)
          const g = c * T + ti, base = ip.gBase[g]!;
          this.entryNodes(e, z, g, wc, iwt, range);
          for (let j = range[0]!; j < range[1]!; j++) {
            const wv = wc[j]!;
            if (wv === 0) continue;
            wc[j] = 0;
            const cl = base + j, k = keyOf[cl]!, f = fp * wv;
            if (seen[k] === 0) {
              seen[k] = 1;
              touched[nt++] = k;
            }
            for (let q = 0; q < coils; q++) {
              const gr = S[2 * (q * nw + c)]! * f, gi = S[2 * (q * nw + c) + 1]! * f, o = 2 * (k * CW + q * W);
              for (let r = 0; r < W; r++) {
                const zr = G[2 * (cl * R + r0 + r)]!, zi = G[2 * (cl * R + r0 + r) + 1]!;
                acc[o + 2 * r] = acc[o + 2 * r]! + (zr * gr - zi * gi);
                acc[o + 2 * r + 1] = acc[o + 2 * r + 1]! + (zr * gi + zi * gr);
              }
            }
          }
          continue;
        }
        for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
          const cl = b0 ? this.classAt(e, z, t) : -1, k = b0 ? keyOf[cl]! : tKey[t]!, f = zF[t]!;
          if (seen[k] === 0) {
            seen[k] = 1;
            touched[nt++] = k;
          }
          const tv = 2 * t * W;
          for (let q = 0; q < coils; q++) {
            const gr = S[2 * (q * nw + c)]! * fp, gi = S[2 * (q * nw + c) + 1]! * fp, o = 2 * (k * CW + q * W);
            for (let r = 0; r < W; r++) {
              // with a B0 model: f·G_r(class) of this term's own class (no per-term table)
              const zr = b0 ? G[2 * (cl * R + r0 + r)]! * f : tVal[tv + 2 * r]!, zi = b0 ? G[2 * (cl * R + r0 + r) + 1]! * f : tVal[tv + 2 * r + 1]!;
              acc[o + 2 * r] = acc[o + 2 * r]! + (zr * gr - zi * gi);
              acc[o + 2 * r + 1] = acc[o + 2 * r + 1]! + (zr * gi + zi * gr);
            }
          }
        }
      }
      for (let i = 0; i < nt; i++) {
        const k = touched[i]!;
        seen[k] = 0;
        const hk = filt ? receiverFilter(fRead * u + keyDf[k]!, bw) : 1;
        for (let q = 0; q < coils; q++) {
          for (let r = 0; r < W; r++) {
            const o = 2 * (k * CW + q * W + r);
            const zr = acc[o]!, zi = acc[o + 1]!;
            acc[o] = 0;
            acc[o + 1] = 0;
            if (hk === 0) continue;
            const wr = (zr * pr0 - zi * pi0) * hk, wi = (zr * pi0 + zi * pr0) * hk;
            addSegments(XB, p * NX + 2 * (r * coils + q) * L, wr, wi, Ck, k, L);
          }
        }
      }
    }
    };
  }

  /**
   * A column of several tissues (or fractions) through the slice, with sensitivities: per tissue the
   * weights g(c) = Σ pd·fraction of its cells, and per coil Σ_c g(c)·S_q(c)·rl[c] from the table's
   * through-slice moments (as a column of one tissue, the same term selection). False (nothing added)
   * when a tissue's table is incomplete or the receiver filter is not flat over its keys.
   */
  private foldMixed(
    col: number, sub: number, u: number, full: { keys: Int32Array; dfLo: number; dfHi: number; mom: Float64Array | null; momNorm: Float64Array | null }[], psi: Float64Array, S: Float64Array,
    pr0: number, pi0: number, ob: number, NX: number, coils: number, W: number, L: number, tol: number, filt: boolean, fRead: number, bw: number, keyDf: number[], XB: Float64Array,
    sc: { gTi: Int32Array; wgt: Float64Array; ws: Float64Array; mom: Float64Array; gam: Float64Array; eTerm: Float64Array; order: Int32Array; drop: Float64Array },
  ): boolean {
    void NX;
    const { cells, D2 } = this, nw = cells.wGrid.length, pd = cells.ctx.pd, WL = W * L;
    const { gTi, wgt, ws, mom, gam, eTerm, order, drop } = sc;
    let ng = 0;
    for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
      const ti = cells.entTissue[e]!;
      let g = 0;
      while (g < ng && gTi[g] !== ti) g++;
      if (g === ng) {
        // no table (a B0 model: its classes vary per cell, so there are none) or none with moments: the per-cell fold
        const tab = full[ti * D2 + sub];
        if (!tab?.mom) return false;
        if (filt && !flatFor(fRead * u, tab.dfLo, tab.dfHi, bw)) return false;
        gTi[ng++] = ti;
        wgt.fill(0, g * nw, (g + 1) * nw);
      }
      const c = cells.entW[e]!;
      wgt[g * nw + c] = wgt[g * nw + c]! + pd[ti]! * cells.entFrac[e]!;
    }
    const st = this.sensStats;
    for (let g = 0; g < ng; g++) {
      const tab = full[gTi[g]! * D2 + sub]!, mt = tab.mom!, momNorm = tab.momNorm!;
      for (let q = 0; q < coils; q++) {
        for (let c = 0; c < nw; c++) {
          const f = wgt[g * nw + c]!;
          ws[2 * (q * nw + c)] = f * S[2 * (q * nw + c)]!;
          ws[2 * (q * nw + c) + 1] = f * S[2 * (q * nw + c) + 1]!;
        }
      }
      projectThroughSlice(psi, ws, coils, nw, mom);
      for (let q = 0; q < coils; q++) {
        const e2 = coilTerms(mom, q, nw, pr0, pi0, momNorm, gam, eTerm);
        const nk = keepTerms(eTerm, nw, tol * Math.sqrt(e2), order, drop);
        addMoments(XB, ob + 2 * q * L, 2 * coils * L, W, L, mt, gam, order, nk, 2 * WL);
        st.columns++;
        st.terms += nk;
        if (e2 > 0) st.maxRel = Math.max(st.maxRel, drop[0]! / Math.sqrt(e2));
      }
    }
    return true;
  }

  /** Every column's isochromats (class, m0, Δf) made on the fly, none kept. */
  columns(): ColumnVisitor {
    return (visit, addSamples, setup) => {
      const per = this.columnEstimator(visit, addSamples, setup), n = this.cells.columns, run = per.oneCoilRun;
      for (let col = 0; col < n; col++) {
        // runs of columns the one-coil table path takes, in one loop; the others one by one
        if (run) col = run(col, n);
        if (col < n) per(col, null);
      }
    };
  }

  /**
   * As columns(), but the columns come from the fold (one pass, with
   * sensitivities): `visitor` (for estimateOver) only sets up; the fold calls
   * `hook` with each column and its sensitivities (evaluated once for both).
   */
  hookedColumns(): { visitor: ColumnVisitor; hook: (col: number, S: Float64Array | null, mom: Float64Array | null) => void } {
    let per: ((col: number, given: Float64Array | null, givenMom?: Float64Array | null) => void) | null = null;
    return {
      visitor: (visit, addSamples, setup) => {
        per = this.columnEstimator(visit, addSamples, setup);
      },
      hook: (col, S, mom) => per!(col, S, mom),
    };
  }

  /** The estimate's work for one column (its sensitivities given, or evaluated here). */
  private columnEstimator(
    visit: Parameters<ColumnVisitor>[0], addSamples: Parameters<ColumnVisitor>[1], setup: Parameters<ColumnVisitor>[2],
  ): ((col: number, given: Float64Array | null, givenMom?: Float64Array | null) => void) & { oneCoilRun?: (c0: number, c1: number) => number } {
    const { cells, T, D2, zStart, zClass, zF, zDf } = this;
    const ip = this.interp, iwt = new Float64Array(ip ? ip.p : 0), perCell = this.eClass !== null || ip !== null;
    const wc = new Float64Array(this.maxGroupNodes()), range = new Int32Array(2);
    let cap = 64;
    for (let col = 0; col < cells.columns; col++) cap = Math.max(cap, cells.colStart[col + 1]! - cells.colStart[col]!);
    // Δf interpolated: at most the column's entries × a group's nodes
    if (ip) for (let col = 0; col < cells.columns; col++) cap = Math.max(cap, (cells.entStart[col + 1]! - cells.entStart[col]!) * wc.length);
    const cls = new Int32Array(cap), m0 = new Float64Array(cap), df = new Float64Array(cap), iw = new Int32Array(cap);
    const pd = cells.ctx.pd, nw = cells.wGrid.length, coils = this.sens?.coils ?? 1, classDf = this.spec.classDf;
    const S0 = this.sens ? new Float64Array(2 * coils * nw) : null, sensIso = this.sens ? new Float64Array(2 * coils * cap) : undefined;
    {
      // A column of one tissue at one fraction through every w, where the receiver
      // filter is 1 for all its keys, is fp·Σ_c S_q(c)·Y[c][s] with
      // Y[c][s] = Σ over the cell's terms of f·Pr_class(row(s))·dec_key(s): the
      // same exact per-class state and decay (no line factor, no segments, no FFT),
      // summed per cell once instead of per isochromat.
      const { S: NS, NR, PJ, Pr, dec, keyOf, keyDf, filter } = setup;
      const Y: (Float64Array | null)[] = [], Ysum: Float64Array[] = [], keysOf: Int32Array[] = [], dfLoHi: [number, number][] = [];
      // With sensitivities, Y's through-slice moments Ym[p][s] = Σ_c ψ_p(c)·Y[c][s] on the fold's basis (complete:
      // Σ_c S(c)·Y[c] = Σ_p s_p·Ym[p]); a column of one tissue leaves out only terms below ESTIMATE_TERM_CUT × the fold's cut.
      const psi = this.sens ? throughSliceBasis(cells.wGrid) : null;
      const Ym: (Float64Array | null)[] = [], YmNorm2: (Float64Array | null)[] = [];
      for (let ti = 0; ti < T; ti++) {
        for (let sub = 0; sub < D2; sub++) {
          if (perCell) {
            // B0 model: classes differ per cell, no per-tissue table
            Y.push(null);
            Ysum.push(new Float64Array(0));
            keysOf.push(new Int32Array(0));
            dfLoHi.push([0, 0]);
            Ym.push(null);
            YmNorm2.push(null);
            continue;
          }
          const y = new Float64Array(2 * nw * NS), ks = new Set<number>();
          let ok = true;
          for (let c = 0; c < nw; c++) {
            const z = (c * T + ti) * D2 + sub;
            if (zStart[z + 1]! === zStart[z]!) ok = false;
            for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
              const cl = zClass[t]!, k = keyOf[cl]!, f = zF[t]!;
              ks.add(k);
              for (let s = 0; s < NS; s++) {
                const w = Math.floor(s / PJ), pr = Pr[2 * (cl * NR + w)]! * f, pi = Pr[2 * (cl * NR + w) + 1]! * f;
                const dr = dec[2 * (k * NS + s)]!, di = dec[2 * (k * NS + s) + 1]!, o = 2 * (c * NS + s);
                y[o] = y[o]! + (pr * dr - pi * di);
                y[o + 1] = y[o + 1]! + (pr * di + pi * dr);
              }
            }
          }
          Y.push(ok ? y : null);
          if (psi && ok) {
            const ym = new Float64Array(2 * nw * NS), yn = new Float64Array(nw);
            sliceMoments(psi, nw, y, 2 * NS, ym, yn);
            for (let p = 0; p < nw; p++) yn[p] = yn[p]! * yn[p]!;
            Ym.push(ym);
            YmNorm2.push(yn);
          } else {
            Ym.push(null);
            YmNorm2.push(null);
          }
          // one uniform coil: the cell's samples summed through the slice once
          const ys = new Float64Array(2 * NS);
          for (let c = 0; c < nw; c++) for (let x = 0; x < 2 * NS; x++) ys[x] = ys[x]! + y[2 * c * NS + x]!;
          Ysum.push(ys);
          keysOf.push(Int32Array.from(ks));
          dfLoHi.push(dfRange(keysOf[keysOf.length - 1]!, keyDf));
        }
      }
      const colv = new Float64Array(2 * coils * NS), gS = new Float64Array(2 * coils * nw), momS = psi ? new Float64Array(2 * coils * nw) : null;
      // with sensitivities: the regrouped sums over the cells' samples Y (columns of several tissues) and over their moments Ym
      const addY = S0 ? setup.cellSums(Y, nw) : null, addYm = S0 ? setup.cellSums(Ym, nw) : null;
      const kept = new Int32Array(coils * nw), m2 = new Float64Array(nw);
      const gTi = new Int32Array(T), gW = new Float64Array(T * nw);
      const oneTissue = this.oneTissueColumns(), { colTi, colFp } = this;
      // Δf interpolated: the estimate's samples per (w, tissue, place) and lattice shift, as the fold's shift tables
      const est = ip ? this.shiftSamples(ip, setup) : null;
      // one coil, tissue tables (no B0 model): runs of columns of one tissue whose table is whole add fp × its
      // through-slice sum, as below, in one loop (oneCoilRun)
      const oneCoilTables = estimateRegrouping.on() ? setup.oneCoilTables : undefined;
      const run: OneCoilRun | null = !S0 && !perCell && oneCoilTables
        ? {
            cells, oneTissue: this.oneTissueColumns(), colTi: this.colTi, colFp: this.colFp, D2,
            whole: Uint8Array.from(Y, (y) => (y === null ? 0 : 1)), flat: new Int8Array(Y.length), flatA: -1, filter,
            lo: Float64Array.from(dfLoHi, (r) => r[0]), hi: Float64Array.from(dfLoHi, (r) => r[1]), Ysum, tables: oneCoilTables,
          }
        : null;
      const per = (col: number, given: Float64Array | null, givenMom?: Float64Array | null): void => {
        // this column's sensitivities: given by the fold, or evaluated where they are read (needS)
        const S: Float64Array | null = S0 ? (given ?? S0) : null;
        let sReady = S0 === null || given !== null;
        const needS = () => {
          if (!sReady) {
            this.sensOf(col, S0!);
            sReady = true;
          }
        };
        const sub = cells.colSub[col]!;
        const e0 = cells.entStart[col]!, e1 = cells.entStart[col + 1]!;
        let uniform = oneTissue[col] === 1;
        if (uniform) uniform = Y[colTi[col]! * D2 + sub] !== null;
        const u = cells.uGrid[cells.colA[col]!]!, v = cells.vGrid[cells.colB[col]!]!;
        if (uniform) {
          const ti = colTi[col]!, z = ti * D2 + sub, fp = colFp[col]!;
          if (!filter || flatFor(filter.fRead * u, dfLoHi[z]![0], dfLoHi[z]![1], filter.bw)) {
            if (!S) {
              // one coil: fp × the tissue's samples summed through the slice (with the regrouping on, such columns
              // went to oneCoilRun instead: this is its reference, every column phased on its own)
              const ys = Ysum[z]!;
              for (let x = 0; x < 2 * NS; x++) colv[x] = ys[x]! * fp;
              addSamples(u, v, colv);
              return;
            }
            // every coil: fp·s_p on the moments Ym[p], the terms of |s_p|·‖Ym_p‖ at most ESTIMATE_TERM_CUT × the fold's
            // tolerance × the coil's largest left out (compared squared)
            if (!estimateRegrouping.on()) {
              needS();
              // the reference: every coil's Σ_c fp·S_q(c)·Y[c] written out, then phased (no moments, no regrouping)
              colv.fill(0);
              for (let q = 0; q < coils; q++) {
                for (let c = 0; c < nw; c++) addScaled(colv, 2 * q * NS, Y[z]!, 2 * c * NS, S[2 * (q * nw + c)]! * fp, S[2 * (q * nw + c) + 1]! * fp, NS);
              }
              addSamples(u, v, colv);
              return;
            }
            const mom = givenMom ?? momS!, yn2 = YmNorm2[z]!, cut2 = (ESTIMATE_TERM_CUT * this.termTol) ** 2;
            if (!givenMom) {
              needS();
              projectThroughSlice(psi!, S, coils, nw, mom);
            }
            const k = keptMoments(mom, yn2, coils, nw, cut2, fp, gS, kept, m2);
            addYm!(z, gS, u, v, cells.colB[col]!, kept, k);
            return;
          }
        } else if (!S && !perCell) {
          // several tissues (or fractions) through the slice, one uniform coil: colv = Σ over its cells of
          // pd·fraction × the cell's row of Y (the same sum regrouped), where every table is whole and flat
          let ok = true;
          for (let e = e0; e < e1 && ok; e++) {
            const z = cells.entTissue[e]! * D2 + sub;
            if (Y[z] === null || (filter && !flatFor(filter.fRead * u, dfLoHi[z]![0], dfLoHi[z]![1], filter.bw))) ok = false;
          }
          if (ok) {
            colv.fill(0);
            for (let e = e0; e < e1; e++) {
              const ti = cells.entTissue[e]!;
              addScaled(colv, 0, Y[ti * D2 + sub]!, 2 * cells.entW[e]! * NS, pd[ti]! * cells.entFrac[e]!, 0, NS);
            }
            addSamples(u, v, colv);
            return;
          }
        } else if (S && !perCell) {
          // several tissues (or fractions) through the slice: per tissue the weights g(c) = Σ pd·fraction of its
          // cells, colv_q = Σ_tissues Σ_c g(c)·S_q(c)·Y[c] (exact), where every tissue's table is whole and flat
          needS();
          let ng = 0, ok = true;
          for (let e = e0; e < e1 && ok; e++) {
            const ti = cells.entTissue[e]!, z = ti * D2 + sub;
            let g = 0;
            while (g < ng && gTi[g] !== ti) g++;
            if (g === ng) {
              if (Y[z] === null) ok = false;
              else if (filter && !flatFor(filter.fRead * u, dfLoHi[z]![0], dfLoHi[z]![1], filter.bw)) ok = false;
              gTi[ng++] = ti;
              gW.fill(0, g * nw, (g + 1) * nw);
            }
            gW[g * nw + cells.entW[e]!] = gW[g * nw + cells.entW[e]!]! + pd[ti]! * cells.entFrac[e]!;
          }
          if (ok && !estimateRegrouping.on()) {
            // the reference: colv_q = Σ_tissues Σ_c g(c)·S_q(c)·Y[c] written out, then phased
            colv.fill(0);
            for (let g = 0; g < ng; g++) {
              for (let q = 0; q < coils; q++) {
                for (let c = 0; c < nw; c++) {
                  const f = gW[g * nw + c]!;
                  addScaled(colv, 2 * q * NS, Y[gTi[g]! * D2 + sub]!, 2 * c * NS, S[2 * (q * nw + c)]! * f, S[2 * (q * nw + c) + 1]! * f, NS);
                }
              }
            }
            addSamples(u, v, colv);
            return;
          }
          if (ok) {
            // per tissue: g(c)·S_q(c) per through-slice cell, summed with the tissue's Y[c] (regrouped per read position)
            for (let g = 0; g < ng; g++) {
              for (let q = 0; q < coils; q++) {
                for (let c = 0; c < nw; c++) {
                  const f = gW[g * nw + c]!;
                  gS[2 * (q * nw + c)] = S[2 * (q * nw + c)]! * f;
                  gS[2 * (q * nw + c) + 1] = S[2 * (q * nw + c) + 1]! * f;
                }
              }
              addY!(gTi[g]! * D2 + sub, gS, u, v, cells.colB[col]!);
            }
            return;
          }
        }
        if (est) {
          if (S) needS();
          if (est.column(col, sub, u, S, coils, colv)) {
            addSamples(u, v, colv);
            return;
          }
        }
        let n = 0;
        for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
          const ti = cells.entTissue[e]!, z = (cells.entW[e]! * T + ti) * D2 + sub, fp = pd[ti]! * cells.entFrac[e]!;
          if (ip) {
            // Δf interpolated: the entry's terms summed onto its group's nodes, each node an isochromat (class, fp·wc, its Δf)
            const g = cells.entW[e]! * T + ti, base = ip.gBase[g]!;
            this.entryNodes(e, z, g, wc, iwt, range);
            for (let j = range[0]!; j < range[1]!; j++) {
              const wv = wc[j]!;
              if (wv === 0) continue;
              wc[j] = 0;
              cls[n] = base + j;
              m0[n] = fp * wv;
              df[n] = classDf[base + j]!;
              iw[n] = cells.entW[e]!;
              n++;
            }
            continue;
          }
          for (let t = zStart[z]!; t < zStart[z + 1]!; t++) {
            const cl = this.classAt(e, z, t);
            cls[n] = cl;
            m0[n] = fp * zF[t]!;
            df[n] = this.eClass ? classDf[cl]! : zDf[t]!;
            iw[n] = cells.entW[e]!;
            n++;
          }
        }
        if (S && sensIso) {
          needS();
          // each isochromat's sensitivity: its cell's, laid out as plan.sens for a set of n isochromats
          for (let q = 0; q < coils; q++) {
            for (let i = 0; i < n; i++) {
              sensIso[2 * (q * n + i)] = S[2 * (q * nw + iw[i]!)]!;
              sensIso[2 * (q * n + i) + 1] = S[2 * (q * nw + iw[i]!) + 1]!;
            }
          }
        }
        visit(u, v, n, cls, m0, df, -1, sensIso);
      };
      return run ? Object.assign(per, { oneCoilRun: (c0: number, c1: number) => oneCoilRun(run, c0, c1) }) : per;
    }
  }

  /** The a-posteriori estimate (fast.ts estimateOver) over the streamed columns. */
  estimate(
    plan: EnginePlan, h: History, actN: number[], ky: Float64Array, kx0: number, dkx: number, ns: number, dwell: number,
    keyOf: Int32Array, keyDf: number[], keyR2: number[],
  ): EstimateFinish {
    return estimateOver(plan, h, actN, ky, kx0, dkx, ns, dwell, keyOf, keyDf, keyR2, this.cells.count, this.columns());
  }

  /** The estimate with its column sums made inside the fold's pass (hookedColumns): `finish` once the fold has visited every column. */
  estimateHooked(
    plan: EnginePlan, h: History, actN: number[], ky: Float64Array, kx0: number, dkx: number, ns: number, dwell: number,
    keyOf: Int32Array, keyDf: number[], keyR2: number[],
  ): { finish: EstimateFinish; hook: (col: number, S: Float64Array | null, mom: Float64Array | null) => void } {
    const { visitor, hook } = this.hookedColumns();
    return { finish: estimateOver(plan, h, actN, ky, kx0, dkx, ns, dwell, keyOf, keyDf, keyR2, this.cells.count, visitor), hook };
  }

  /** Columns c0 … c1−1 (as the chunk sampler of the cost model reads them). */
  columnRange(c0: number, c1: number, visit: (a: number, b: number, n: number, cls: Int32Array) => void): void {
    const { cells, T, D2, zStart, zClass } = this;
    let cls = new Int32Array(64);
    const ip = this.interp, iwt = new Float64Array(ip ? ip.p : 0), wc = new Float64Array(this.maxGroupNodes()), range = new Int32Array(2);
    for (let col = c0; col < c1; col++) {
      const sub = cells.colSub[col]!;
      const need = ip ? (cells.entStart[col + 1]! - cells.entStart[col]!) * wc.length : cells.colStart[col + 1]! - cells.colStart[col]!;
      if (need > cls.length) cls = new Int32Array(need);
      let n = 0;
      for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
        const z = (cells.entW[e]! * T + cells.entTissue[e]!) * D2 + sub;
        if (ip) {
          // Δf interpolated: the nodes the entry's terms reach
          const g = cells.entW[e]! * T + cells.entTissue[e]!;
          this.entryNodes(e, z, g, wc, iwt, range);
          for (let j = range[0]!; j < range[1]!; j++) {
            if (wc[j] === 0) continue;
            wc[j] = 0;
            cls[n++] = ip.gBase[g]! + j;
          }
          continue;
        }
        for (let t = zStart[z]!; t < zStart[z + 1]!; t++) cls[n++] = this.classAt(e, z, t);
      }
      visit(cells.colA[col]!, cells.colB[col]!, n, cls);
    }
  }
}

/** The estimate's one-coil column run (oneCoilRun): what it reads, and the receiver filter's flatness per table at the current read position. */
interface OneCoilRun {
  cells: IsochromatCells;
  oneTissue: Uint8Array; colTi: Int32Array; colFp: Float64Array; D2: number;
  /** Per table: 1 where it is whole (every through-slice cell has terms). */
  whole: Uint8Array;
  /** Per table at read index flatA: 0 not yet known, 1 the filter is flat over its keys, −1 not. */
  flat: Int8Array; flatA: number;
  filter: { fRead: number; bw: number } | null;
  /** Per table: the Δf range (Hz) of its keys. */
  lo: Float64Array; hi: Float64Array;
  Ysum: readonly Float64Array[];
  tables: OneCoilTables;
}

/**
 * One coil, the estimate's columns c0 … c1−1 while each is one tissue at one fraction through the
 * slice, its table whole and the receiver filter flat over the table's keys: fp × the table's
 * through-slice sum (OneCoilTables). Returns the first column that is not (or c1). A module
 * function rather than a closure per run, so that V8 keeps its optimised code between runs.
 */
function oneCoilRun(r: OneCoilRun, c0: number, c1: number): number {
  const { oneTissue, colTi, colFp, D2, whole, flat, lo, hi, filter, Ysum, tables } = r;
  const { colA, colB, colSub, uGrid, vGrid } = r.cells;
  for (let col = c0; col < c1; col++) {
    if (oneTissue[col] !== 1) return col;
    const z = colTi[col]! * D2 + colSub[col]!, a = colA[col]!;
    if (whole[z] !== 1) return col;
    if (a !== r.flatA) {
      r.flatA = a;
      flat.fill(0);
    }
    if (flat[z] === 0) flat[z] = !filter || flatFor(filter.fRead * uGrid[a]!, lo[z]!, hi[z]!, filter.bw) ? 1 : -1;
    if (flat[z] !== 1) return col;
    const b = colB[col]!;
    tables.add(z, Ysum, colFp[col]!, uGrid[a]!, vGrid[b]!, b);
  }
  return c1;
}

/**
 * Coil q's through-slice terms of one column: gam[p] = s_p·(wr + i·wi) with
 * s_p = mom[q·nw + p] (the sensitivity's moments), and each term's bound
 * eTerm[p] = |s_p|·‖M_p‖; returns Σ eTerm².
 */
function coilTerms(mom: Float64Array, q: number, nw: number, wr: number, wi: number, momNorm: Float64Array, gam: Float64Array, eTerm: Float64Array): number {
  let e2 = 0;
  for (let pp = 0; pp < nw; pp++) {
    const gr = mom[2 * (q * nw + pp)]!, gi = mom[2 * (q * nw + pp) + 1]!;
    gam[2 * pp] = gr * wr - gi * wi;
    gam[2 * pp + 1] = gr * wi + gi * wr;
    const e = Math.sqrt(gr * gr + gi * gi) * momNorm[pp]!;
    eTerm[pp] = e;
    e2 += e * e;
  }
  return e2;
}

/**
 * Through-slice moments of a table of nw rows of `len` numbers each:
 * mom[p·len + x] = Σ_c ψ_p(c)·tab[c·len + x], and each moment row's L2 norm.
 */
function sliceMoments(psi: Float64Array, nw: number, tab: Float64Array, len: number, mom: Float64Array, norm: Float64Array): void {
  for (let p = 0; p < nw; p++) {
    let n2 = 0;
    for (let x = 0; x < len; x++) {
      let m = 0;
      for (let c = 0; c < nw; c++) m += psi[p * nw + c]! * tab[len * c + x]!;
      mom[len * p + x] = m;
      n2 += m * m;
    }
    norm[p] = Math.sqrt(n2);
  }
}

/** dst[d + 2s …] += src[s0 + 2s …]·(gr + i·gi) for s = 0 … n − 1 (complex, interleaved). */
function addScaled(dst: Float64Array, d: number, src: Float64Array, s0: number, gr: number, gi: number, n: number): void {
  for (let s = 0; s < n; s++) {
    const yr = src[s0 + 2 * s]!, yi = src[s0 + 2 * s + 1]!, o = d + 2 * s;
    dst[o] = dst[o]! + (yr * gr - yi * gi);
    dst[o + 1] = dst[o + 1]! + (yr * gi + yi * gr);
  }
}

/** The least and the greatest Δf of the keys (+∞, −∞ for none). */
function dfRange(keys: Int32Array, keyDf: number[]): [number, number] {
  let lo = Infinity, hi = -Infinity;
  for (const k of keys) {
    lo = Math.min(lo, keyDf[k]!);
    hi = Math.max(hi, keyDf[k]!);
  }
  return [lo, hi];
}

/**
 * Whether the receiver filter is 1 at f0 + Δf for every key of a table, its Δf
 * within [lo, hi]: receiverFilter(f0 + Δf, bw) === 1 is |fl(f0 + Δf)|/bw ≤ 0.42,
 * and fl(f0 + Δf) is non-decreasing in Δf (rounding is monotonic), so the
 * largest |fl(f0 + Δf)| is at Δf = lo or hi: the same answer as every key in
 * turn. No key: true.
 */
function flatFor(f0: number, lo: number, hi: number, bw: number): boolean {
  if (lo > hi) return true;
  return receiverFilter(f0 + lo, bw) === 1 && receiverFilter(f0 + hi, bw) === 1;
}

/**
 * The estimate's column sums regrouped per read position (with sensitivities EstimateSetup.cellSums, a column of
 * one tissue on the through-slice moments; with one coil EstimateSetup.oneCoilTables): on by default; off, every
 * column's sums are written out and phased (the reference the tests compare with: the same direct sum in another
 * order).
 */
const estimateRegrouping = kernelSwitch();
/** Switches the estimate's regrouped column sums on or off (for tests); returns the previous setting. */
export function setEstimateRegrouping(on: boolean): boolean {
  return estimateRegrouping.set(on);
}

/**
 * The estimate's column sums leave out a through-slice term only below this
 * fraction of the fold's own cut (tolerance/split) times the column's largest
 * term (|s_p|·‖Ym_p‖): a thousandth of what the fold may leave out, so the
 * estimate stays the direct sum to well within what it measures.
 */
const ESTIMATE_TERM_CUT = 1e-3;

/**
 * The estimate's terms of one coil-sensitive column of one tissue: per coil q, the terms p with
 * |mom_p|²·yn2[p] > cut2 × the coil's largest of them (yn2: ‖Ym_p‖²), as entry idx[i] = q·nw + p with the
 * weight fp·mom_p at g[2i] (interleaved), in (q, p) order; returns their number. m2: nw numbers of scratch.
 */
function keptMoments(mom: Float64Array, yn2: Float64Array, coils: number, nw: number, cut2: number, fp: number, g: Float64Array, idx: Int32Array, m2: Float64Array): number {
  let k = 0;
  for (let q = 0; q < coils; q++) {
    const o = 2 * q * nw;
    let big = 0;
    for (let p = 0; p < nw; p++) {
      const gr = mom[o + 2 * p]!, gi = mom[o + 2 * p + 1]!, e = (gr * gr + gi * gi) * yn2[p]!;
      m2[p] = e;
      if (e > big) big = e;
    }
    const cut = cut2 * big;
    for (let p = 0; p < nw; p++) {
      if (!(m2[p]! > cut)) continue;
      idx[k] = q * nw + p;
      g[2 * k] = mom[o + 2 * p]! * fp;
      g[2 * k + 1] = mom[o + 2 * p + 1]! * fp;
      k++;
    }
  }
  return k;
}

/**
 * The terms to keep: e[p] ≤ budget/n are left out, then the smallest of the
 * others while the sum of those left out stays at most `budget`; the kept
 * indices (ascending) go to order[0 … k), the sum of the left-out e to
 * dropped[0]; returns k.
 */
export function keepTerms(e: Float64Array, n: number, budget: number, order: Int32Array, dropped: Float64Array): number {
  // first every term within budget/n (their sum fits), then the smallest kept ones while the rest of the budget allows
  let sum = 0, k = 0;
  const cut = budget / n;
  for (let p = 0; p < n; p++) {
    if (e[p]! <= cut) sum += e[p]!;
    else order[k++] = p;
  }
  for (;;) {
    let best = -1;
    for (let i = 0; i < k; i++) if (best < 0 || e[order[i]!]! < e[order[best]!]!) best = i;
    if (best < 0 || sum + e[order[best]!]! > budget) break;
    sum += e[order[best]!]!;
    for (let i = best; i < k - 1; i++) order[i] = order[i + 1]!;
    k--;
  }
  dropped[0] = sum;
  return k;
}

/**
 * XB[ob + r·rStride + 2l] += Σ_i γ_{p_i}·M_{p_i}[r·L + l] over the kept terms
 * p_i = order[i] (i < nk, in that order from zero): M_p at M[p·mStride …],
 * γ_p at gam[2p] (both interleaved).
 */
function addMoments(XB: Float64Array, ob: number, rStride: number, W: number, L: number, M: Float64Array, gam: Float64Array, order: Int32Array, nk: number, mStride: number): void {
  // one to three terms (most columns): a loop of its own for each count, the factors in locals; the same sums in the same order
  if (nk === 1) {
    const p0 = order[0]!;
    addMoments1(XB, ob, rStride, W, L, M, p0 * mStride, gam[2 * p0]!, gam[2 * p0 + 1]!);
    return;
  }
  if (nk === 2) {
    const p0 = order[0]!, p1 = order[1]!;
    addMoments2(XB, ob, rStride, W, L, M, p0 * mStride, p1 * mStride, gam[2 * p0]!, gam[2 * p0 + 1]!, gam[2 * p1]!, gam[2 * p1 + 1]!);
    return;
  }
  if (nk === 3) {
    const p0 = order[0]!, p1 = order[1]!, p2 = order[2]!;
    addMoments3(XB, ob, rStride, W, L, M, p0 * mStride, p1 * mStride, p2 * mStride, gam[2 * p0]!, gam[2 * p0 + 1]!, gam[2 * p1]!, gam[2 * p1 + 1]!, gam[2 * p2]!, gam[2 * p2 + 1]!);
    return;
  }
  for (let r = 0; r < W; r++) {
    const o0 = ob + r * rStride;
    for (let l = 0; l < L; l++) {
      const x2 = 2 * (r * L + l);
      let vr = 0, vi = 0;
      for (let i = 0; i < nk; i++) {
        const pp = order[i]!, zr = M[pp * mStride + x2]!, zi = M[pp * mStride + x2 + 1]!, gr = gam[2 * pp]!, gi = gam[2 * pp + 1]!;
        vr = vr + (zr * gr - zi * gi);
        vi = vi + (zr * gi + zi * gr);
      }
      const o = o0 + 2 * l;
      XB[o] = XB[o]! + vr;
      XB[o + 1] = XB[o + 1]! + vi;
    }
  }
}

/** addMoments of one term at M[m0 …] (γ = g0). */
function addMoments1(XB: Float64Array, ob: number, rStride: number, W: number, L: number, M: Float64Array, m0: number, g0r: number, g0i: number): void {
  for (let r = 0; r < W; r++) {
    let o = ob + r * rStride, x = m0 + 2 * r * L;
    const end = o + 2 * L;
    for (; o < end; o += 2, x += 2) {
      const zr = M[x]!, zi = M[x + 1]!;
      XB[o] = XB[o]! + (0 + (zr * g0r - zi * g0i));
      XB[o + 1] = XB[o + 1]! + (0 + (zr * g0i + zi * g0r));
    }
  }
}

/** addMoments of two terms at M[m0 …], M[m1 …] (γ = g0, g1), summed in that order. */
function addMoments2(XB: Float64Array, ob: number, rStride: number, W: number, L: number, M: Float64Array, m0: number, m1: number, g0r: number, g0i: number, g1r: number, g1i: number): void {
  for (let r = 0; r < W; r++) {
    let o = ob + r * rStride, x = 2 * r * L;
    const end = o + 2 * L;
    for (; o < end; o += 2, x += 2) {
      const ar = M[m0 + x]!, ai = M[m0 + x + 1]!, br = M[m1 + x]!, bi = M[m1 + x + 1]!;
      const vr = 0 + (ar * g0r - ai * g0i) + (br * g1r - bi * g1i);
      const vi = 0 + (ar * g0i + ai * g0r) + (br * g1i + bi * g1r);
      XB[o] = XB[o]! + vr;
      XB[o + 1] = XB[o + 1]! + vi;
    }
  }
}

/** addMoments of three terms at M[m0 …], M[m1 …], M[m2 …] (γ = g0, g1, g2), summed in that order. */
function addMoments3(
  XB: Float64Array, ob: number, rStride: number, W: number, L: number, M: Float64Array, m0: number, m1: number, m2: number,
  g0r: number, g0i: number, g1r: number, g1i: number, g2r: number, g2i: number,
): void {
  for (let r = 0; r < W; r++) {
    let o = ob + r * rStride, x = 2 * r * L;
    const end = o + 2 * L;
    for (; o < end; o += 2, x += 2) {
      const ar = M[m0 + x]!, ai = M[m0 + x + 1]!, br = M[m1 + x]!, bi = M[m1 + x + 1]!, cr = M[m2 + x]!, ci = M[m2 + x + 1]!;
      const vr = 0 + (ar * g0r - ai * g0i) + (br * g1r - bi * g1i) + (cr * g2r - ci * g2i);
      const vi = 0 + (ar * g0i + ai * g0r) + (br * g1i + bi * g1r) + (cr * g2i + ci * g2r);
      XB[o] = XB[o]! + vr;
      XB[o + 1] = XB[o + 1]! + vi;
    }
  }
}

/**
 * The one pass over the cells' entries that the stream's set-up needs: which
 * combinations z = (w·T + tissue)·D2 + sub occur, each one's Σ |pd·fraction|
 * (added in column and entry order: classInfo's magnetization), and per column
 * whether it is one tissue at one fraction through every w in w order
 * (oneTissueColumns), with its first entry's tissue and pd·fraction.
 */
function cellPass(cells: IsochromatCells, T: number, D2: number, pd: ArrayLike<number>, occurs: Uint8Array, fsum: Float64Array, one: Uint8Array, colTi: Int32Array, colFp: Float64Array): void {
  const { entStart, entTissue, entW, entFrac, colSub } = cells, nw = cells.wGrid.length, cols = cells.columns;
  for (let col = 0; col < cols; col++) {
    const sub = colSub[col]!, e0 = entStart[col]!, e1 = entStart[col + 1]!;
    if (e1 === e0) continue;
    const ti0 = entTissue[e0]!, fr0 = entFrac[e0]!;
    colTi[col] = ti0;
    colFp[col] = pd[ti0]! * fr0;
    let same = e1 - e0 === nw;
    for (let e = e0; e < e1; e++) {
      const ti = entTissue[e]!, w = entW[e]!, fr = entFrac[e]!, z = (w * T + ti) * D2 + sub;
      occurs[z] = 1;
      fsum[z] = fsum[z]! + Math.abs(pd[ti]! * fr);
      if (ti !== ti0 || fr !== fr0 || w !== e - e0) same = false;
    }
    if (same) one[col] = 1;
  }
}
