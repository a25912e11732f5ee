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
import { cellContents, cellUniform, type Phantom } from "../phantom/index.js";
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
  const cell = { tissue: new Int32Array(ph.tissues.length + 1), fraction: new Float64Array(ph.tissues.length + 1) };
  const e1 = axes.read.map((a) => a * dx), e2 = axes.phase.map((a) => a * dy), e3 = axes.slice.map((a) => a * thickness);
  const cr = Math.floor(nRead / 2), cp = Math.floor(nPhase / 2);
  const pixel = (i: number, j: number, uniform: number): void => {
    const u = (i - cr) * dx, v = (j - cp) * dy;
    const x = axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * position;
    const y = axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * position;
    const z = axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * position;
    const k = j * nRead + i;
    let count: number;
    if (uniform >= -1) {
      // inside a tile certainly filled by one tissue (or empty): what cellContents gives this pixel
      count = uniform >= 0 ? 1 : 0;
      cell.tissue[0] = uniform;
      cell.fraction[0] = 1;
    } else count = cellContents(ph, x, y, z, e1, e2, e3, cell);
    let pd = 0, w = 0, t1 = 0, t2 = 0, t2s = 0, ff = 0, best = -1, bestF = 0;
    for (let q = 0; q < count; q++) {
      const t = ph.tissues[cell.tissue[q]!]!, f = cell.fraction[q]!;
      pd += f * t.pd;
      const wt = f * t.pd;
      w += wt; t1 += wt * t.t1; t2 += wt * t.t2; t2s += wt * t.t2star; ff += wt * t.fatFraction;
      if (f > bestF) { bestF = f; best = cell.tissue[q]!; }
    }
    m.pd[k] = pd;
    if (!all) {
      if (w > 0) m.fatFraction[k] = ff / w;
      return;
    }
    if (w > 0) { m.t1[k] = t1 / w; m.t2[k] = t2 / w; m.t2star[k] = t2s / w; m.fatFraction[k] = ff / w; }
    m.label[k] = best + 1;
    m.df[k] = (ph.b0 ? ph.b0(x, y, z) : 0) + g.offsetHz;
  };
  // tiles of TILE × TILE pixels: one classification for a tile certainly filled by one tissue (or empty),
  // the pixels of the others one by one (cells.ts cellUniform: the same numbers)
  const e1t = [0, 0, 0], e2t = [0, 0, 0];
  for (let j0 = 0; j0 < nPhase; j0 += TILE) {
    const nj = Math.min(TILE, nPhase - j0), v = ((j0 + (nj - 1) / 2) - cp) * dy;
    for (let q = 0; q < 3; q++) e2t[q] = e2[q]! * nj;
    for (let i0 = 0; i0 < nRead; i0 += TILE) {
      const ni = Math.min(TILE, nRead - i0), u = ((i0 + (ni - 1) / 2) - cr) * dx;
      for (let q = 0; q < 3; q++) e1t[q] = e1[q]! * ni;
      const uniform = ni * nj > 1
        ? cellUniform(
            ph,
            axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * position,
            axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * position,
            axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * position,
            e1t, e2t, e3,
          )
        : -2;
      for (let j = j0; j < j0 + nj; j++) for (let i = i0; i < i0 + ni; i++) pixel(i, j, uniform);
    }
  }
  return m;
}
