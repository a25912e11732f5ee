/**
 * Ground-truth maps on the image grid: what the phantom holds in each
 * reconstructed voxel (pixel n along an axis of N sits at (n − ⌊N/2⌋)·Δ, the
 * slice at its position; the voxel spans Δread × Δphase × slice thickness).
 * Partial volume: every map is the volume-fraction-weighted value of the
 * tissues in the voxel (pd: Σ fraction·PD; t1, t2, t2star, fatFraction:
 * weighted by fraction·PD; label: the tissue filling the largest fraction,
 * 1-based, 0 = empty). df is the off-resonance (Hz) at the voxel centre
 * (phantom B0 model plus global offset, no chemical shift).
 */
import { shapeCellContents, shapeCellUniform, type Phantom, type Shape } from "../phantom/index.js";
import type { Axes } from "../protocol/geometry.js";

/** Pixels per tile edge of truthMaps' classification. */
const TILE = 8;

export interface TruthMaps {
  nRead: number;
  nPhase: number;
  /** Row-major [phase][read]; times in s, df in Hz. */
  pd: Float64Array;
  t1: Float64Array;
  t2: Float64Array;
  t2star: Float64Array;
  df: Float64Array;
  fatFraction: Float64Array;
  label: Int32Array;
  /** label − 1 ↦ tissue name. */
  labels: string[];
}

export interface TruthGrid {
  axes: Axes;
  nRead: number;
  nPhase: number;
  dx: number;
  dy: number;
  thickness: number;
  position: number;
  /** Global frequency offset added to df (Hz). */
  offsetHz: number;
}

/**
 * What {@link truthPixels} reads and fills: numbers, typed arrays, the Shape objects and the B0 model (a
 * class: the loop's code sees the same V8 maps in every run, where an object literal made per run may get a
 * new map and send the code back to be compiled again).
 */
class TruthPass {
  constructor(
    readonly shapes: Shape[],
    readonly nT: number,
    /** Per tissue: pd, t1, t2, t2star, fatFraction. */
    readonly pd: Float64Array,
    readonly t1: Float64Array,
    readonly t2: Float64Array,
    readonly t2star: Float64Array,
    readonly fat: Float64Array,
    readonly b0: ((x: number, y: number, z: number) => number) | null,
    /** Logical read, phase and slice axes one after another (9 numbers). */
    readonly axes: Float64Array,
    readonly nRead: number,
    readonly nPhase: number,
    readonly dx: number,
    readonly dy: number,
    readonly thickness: number,
    readonly position: number,
    readonly offsetHz: number,
    /** Every map, or pd and fatFraction alone ("pd-fat"). */
    readonly all: boolean,
    readonly outPd: Float64Array,
    readonly outT1: Float64Array,
    readonly outT2: Float64Array,
    readonly outT2star: Float64Array,
    readonly outDf: Float64Array,
    readonly outFat: Float64Array,
    readonly outLabel: Int32Array,
  ) {}
}

/**
 * truthMaps' pass over the pixels: tiles of TILE × TILE pixels, one classification for a tile certainly
 * filled by one tissue (or empty), the pixels of the others one by one (cells.ts cellUniform: the same numbers).
 */
function truthPixels(g: TruthPass): void {
  const { shapes, nT, pd: tPd, t1: tT1, t2: tT2, t2star: tT2s, fat: tFat, b0, axes, nRead, nPhase, dx, dy, thickness, position, offsetHz, all } = g;
  const { outPd, outT1, outT2, outT2star, outDf, outFat, outLabel } = g;
  const r0 = axes[0]!, r1 = axes[1]!, r2 = axes[2]!, p0 = axes[3]!, p1 = axes[4]!, p2 = axes[5]!, s0 = axes[6]!, s1 = axes[7]!, s2 = axes[8]!;
  const cellTissue = new Int32Array(nT + 1), cellFrac = new Float64Array(nT + 1);
  const e1 = Float64Array.of(r0 * dx, r1 * dx, r2 * dx), e2 = Float64Array.of(p0 * dy, p1 * dy, p2 * dy), e3 = Float64Array.of(s0 * thickness, s1 * thickness, s2 * thickness);
  const cr = Math.floor(nRead / 2), cp = Math.floor(nPhase / 2);
  const e1t = new Float64Array(3), e2t = new Float64Array(3);
  for (let j0 = 0; j0 < nPhase; j0 += TILE) {
    const nj = Math.min(TILE, nPhase - j0), tv = ((j0 + (nj - 1) / 2) - cp) * dy;
    for (let q = 0; q < 3; q++) e2t[q] = e2[q]! * nj;
    for (let i0 = 0; i0 < nRead; i0 += TILE) {
      const ni = Math.min(TILE, nRead - i0), tu = ((i0 + (ni - 1) / 2) - cr) * dx;
      for (let q = 0; q < 3; q++) e1t[q] = e1[q]! * ni;
      const uniform = ni * nj > 1
        ? shapeCellUniform(shapes, r0 * tu + p0 * tv + s0 * position, r1 * tu + p1 * tv + s1 * position, r2 * tu + p2 * tv + s2 * position, e1t, e2t, e3)
        : -2;
      for (let j = j0; j < j0 + nj; j++) {
        for (let i = i0; i < i0 + ni; i++) {
          const u = (i - cr) * dx, v = (j - cp) * dy;
          const x = r0 * u + p0 * v + s0 * position;
          const y = r1 * u + p1 * v + s1 * position;
          const z = r2 * u + p2 * v + s2 * position;
          const k = j * nRead + i;
          let count: number;
          if (uniform >= -1) {
            // inside a tile certainly filled by one tissue (or empty): what cellContents gives this pixel
            count = uniform >= 0 ? 1 : 0;
            cellTissue[0] = uniform;
            cellFrac[0] = 1;
          } else count = shapeCellContents(shapes, nT, x, y, z, e1, e2, e3, cellTissue, cellFrac);
          let pd = 0, w = 0, t1 = 0, t2 = 0, t2s = 0, ff = 0, best = -1, bestF = 0;
          for (let q = 0; q < count; q++) {
            const t = cellTissue[q]!, f = cellFrac[q]!;
            pd += f * tPd[t]!;
            const wt = f * tPd[t]!;
            w += wt; t1 += wt * tT1[t]!; t2 += wt * tT2[t]!; t2s += wt * tT2s[t]!; ff += wt * tFat[t]!;
            if (f > bestF) { bestF = f; best = t; }
          }
          outPd[k] = pd;
          if (!all) {
            if (w > 0) outFat[k] = ff / w;
            continue;
          }
          if (w > 0) { outT1[k] = t1 / w; outT2[k] = t2 / w; outT2star[k] = t2s / w; outFat[k] = ff / w; }
          outLabel[k] = best + 1;
          outDf[k] = (b0 ? b0(x, y, z) : 0) + offsetHz;
        }
      }
    }
  }
}

/**
 * Samples the phantom on the image grid (see the file comment). `only`
 * "pd-fat": pd and fatFraction alone (the other maps empty, no B0 evaluated;
 * pd and fatFraction the same numbers), for a fine grid that needs no more.
 */
export function truthMaps(ph: Phantom, g: TruthGrid, only?: "pd-fat"): TruthMaps {
  const { axes, nRead, nPhase, dx, dy, thickness, position } = g;
  const n = nRead * nPhase;
  const all = only !== "pd-fat", na = all ? n : 0;
  const m: TruthMaps = {
    nRead, nPhase,
    pd: new Float64Array(n), t1: new Float64Array(na), t2: new Float64Array(na), t2star: new Float64Array(na),
    df: new Float64Array(na), fatFraction: new Float64Array(n), label: new Int32Array(na),
    labels: ph.tissues.map((t) => t.name),
  };
  const nT = ph.tissues.length;
  const col = (f: (t: Phantom["tissues"][number]) => number) => Float64Array.from(ph.tissues, f);
  truthPixels(new TruthPass(
    ph.shapes, nT, col((t) => t.pd), col((t) => t.t1), col((t) => t.t2), col((t) => t.t2star), col((t) => t.fatFraction),
    ph.b0 ?? null, Float64Array.from([...axes.read, ...axes.phase, ...axes.slice]), nRead, nPhase, dx, dy, thickness, position, g.offsetHz, all,
    m.pd, m.t1, m.t2, m.t2star, m.df, m.fatFraction, m.label,
  ));
  return m;
}
