/**
 * Discretizes a phantom into spin isochromats on a sub-voxel grid in the
 * protocol's logical frame: `density` isochromats per voxel along read and
 * phase, and `sliceCount` through the slice over `sliceExtent` slice
 * thicknesses (beyond the slice, so the excitation profile is simulated, not
 * assumed). The grid covers the whole object, not only the FOV, so wrap
 * happens by itself.
 *
 * Each isochromat carries the equilibrium magnetization of the part of its
 * cell that one tissue fills (partial volume): m0 = PD · fraction ·
 * (1/density²) · (Δw/thickness), so a voxel filled with PD = 1 and an ideal
 * rectangular slice profile reconstructs to 1. A tissue holding fat gives one
 * isochromat per spectral peak, weighted by the peak amplitude. A tissue with
 * T2* < T2 carries a T2′ spread (spread.ts): N off-resonances from a Lorentzian
 * of width 1/(πT2′) at deterministic quantiles, the same set in every voxel (so
 * RF classes stay few), shared among the voxel's d² columns when N allows.
 * Every isochromat's Δf = B0 model + global offset (shim) + chemical shift +
 * spread offset.
 *
 * Isochromats sharing an in-plane grid position (a column) are contiguous.
 */
import { GAMMA_BAR, FAT_PEAKS_AMPLITUDE, FAT_PEAKS_PPM, FAT_SINGLE_PPM } from "../constants.js";
import { phantomBounds, shapeCellContents, shapeCellUniform, type Phantom, type Shape } from "../phantom/index.js";
import type { Axes } from "../protocol/geometry.js";
import { UserError } from "../errors.js";
import { ISOCHROMAT_FLOAT_ARRAYS, ISOCHROMAT_INT_ARRAYS, type IsoArrays } from "./fields.js";
import { lorentzianSpread, r2prime, spreadAssignment, NO_SPREAD, type Spread } from "./spread.js";

export { ISOCHROMAT_FLOAT_ARRAYS, ISOCHROMAT_INT_ARRAYS, ENGINE_ARRAYS, mapIsochromatArrays } from "./fields.js";
export { lorentzianSpread, r2prime, spreadAssignment, spreadFid, spreadRelativeError, spreadSizeFor, spreadWarnings, spreadWorstError, autoClosedForm, t2primeGroups, NO_SPREAD, SPREAD_WARN_TOLERANCE, type Spread } from "./spread.js";

export type FatModelChoice = "single" | "multi";

/** How T2′ is modelled (IsochromatOptions.t2primeModel). */
export type T2primeModel = "auto" | "spread" | "closed-form";
export const T2PRIME_MODELS: readonly T2primeModel[] = ["auto", "spread", "closed-form"];

export interface IsochromatOptions {
  /** Isochromats per voxel along each in-plane axis (≥ 1). */
  density: number;
  /** Isochromats through the slice (≥ 1). */
  sliceCount: number;
  /** Span of the through-slice isochromats in slice thicknesses (> 0). */
  sliceExtent: number;
  /** Fat spectrum used unless a tissue says otherwise. */
  fatModel: FatModelChoice;
  /**
   * Isochromats per voxel (and per spectral peak) that carry the T2′ spread
   * (see spread.ts for the accuracy table); 1 = no spread, the tissue then
   * decays with T2 only plus whatever B0 the phantom defines. 1–1024.
   */
  t2primeIsochromats: number;
  /**
   * How T2′ (T2* below T2) is modelled: "spread" — the Lorentzian spread of t2primeIsochromats isochromats;
   * "closed-form" — no spread, each isochromat decays with R2* = R2 + R2′ (the Lorentzian's exact
   * ensemble average where nothing refocuses it: an ideally spoiled gradient echo); "auto" (default) — the
   * closed form for a tissue whose spread would be off by more than 5 % at the echo of an ideally spoiled
   * gradient echo, the spread otherwise. prepareSimulation decides per tissue (`t2primeClosed`).
   */
  t2primeModel?: T2primeModel;
  /** Per tissue (phantom order): true where T2′ is in closed form (R2* = R2 + R2′, no spread); set by prepareSimulation. */
  t2primeClosed?: readonly boolean[];
  /** Global frequency offset added to every isochromat (Hz), e.g. the protocol's shim offset. */
  offsetHz: number;
}

/**
 * Default T2′ spread size: 16 per voxel (4 per column at the default density 2); the
 * voxel FID follows exp(−t/T2′) within about 0.24 of M0 over 3·T2′ (table in spread.ts).
 */
export const DEFAULT_T2PRIME_ISOCHROMATS = 16;

export function defaultIsochromatOptions(): IsochromatOptions {
  return { density: 2, sliceCount: 12, sliceExtent: 3, fatModel: "multi", t2primeIsochromats: DEFAULT_T2PRIME_ISOCHROMATS, offsetHz: 0 };
}

/** The T2′ spread used for one tissue, for reports. */
export interface TissueSpread {
  tissue: string;
  /** T2′ (s), Infinity without spread. */
  t2prime: number;
  /** Spread isochromats per voxel and peak (1 in closed form). */
  count: number;
  /** T2′ as R2* = R2 + R2′ on every isochromat of the tissue instead of a spread. */
  closedForm: boolean;
}

/** Geometry of the sampled region and the voxel grid, in logical coordinates (m). */
export interface IsoGeometry {
  axes: Axes;
  /** Voxel size along read and phase (m), slice thickness (m), slice centre (m). */
  dx: number;
  dy: number;
  thickness: number;
  position: number;
  /**
   * Half-extents (m) along read and phase beyond which the object is not
   * sampled; Infinity samples every shape's full extent (so tissue outside the
   * FOV wraps as on a scanner). A finite limit that cuts tissue adds a warning
   * naming the shapes and the extent left out, unless `readStopBand` says the
   * read limit lies where the receiver filter passes nothing (then a note).
   */
  clipRead: number;
  clipPhase: number;
  /** Half-extents (m) used for shapes that are unbounded along read / phase (2D shapes on a tilted plane); default: the clip, or 1.5 m. */
  unboundedRead?: number;
  unboundedPhase?: number;
  /** The read clip is where the receiver filter stops all signal (tissue beyond it cannot contribute). */
  readStopBand?: boolean;
}

/** Sampled range (m) along each logical axis, for reports. */
export interface SampledExtent {
  read: [number, number];
  phase: [number, number];
  slice: [number, number];
}

/** The isochromats, structure of arrays. */
export interface IsochromatSet {
  count: number;
  /** Grid coordinates (m) along read (u), phase (v) and slice (w); iu/iv/iw index them. */
  uGrid: Float64Array;
  vGrid: Float64Array;
  wGrid: Float64Array;
  iu: Int32Array;
  iv: Int32Array;
  iw: Int32Array;
  /** Physical position (m). */
  x: Float64Array;
  y: Float64Array;
  z: Float64Array;
  /** Equilibrium magnetization (image units), relaxation rates 1/T1 and 1/T2 (1/s), off-resonance (Hz). */
  m0: Float64Array;
  r1: Float64Array;
  r2: Float64Array;
  df: Float64Array;
  /** Tissue index into phantom.tissues; spectral peak (0 = water, 1… = fat peaks). */
  tissue: Int32Array;
  peak: Int32Array;
  /** Columns: isochromats colStart[c] … colStart[c+1]−1 share (iu, iv). */
  colStart: Int32Array;
  columns: number;
  warnings: string[];
  /** Facts about the sampling that lose no signal (e.g. tissue beyond the receiver filter's stop band). */
  notes: string[];
  /** Range of the isochromat grid along read, phase and slice (m). */
  extent: SampledExtent;
  /** T2′ spread per tissue (index as phantom.tissues). */
  spreads: TissueSpread[];
}


/** The per-isochromat arrays, each on a SharedArrayBuffer of its own. */
function allocate(n: number): IsoArrays {
  // shared memory where the JavaScript engine has it (browsers: cross-origin isolated pages only)
  const buf = (bytes: number) => (typeof SharedArrayBuffer === "function" ? new SharedArrayBuffer(bytes) : new ArrayBuffer(bytes));
  const out = {} as Record<string, Int32Array | Float64Array>;
  for (const k of ISOCHROMAT_INT_ARRAYS) out[k] = new Int32Array(buf(Math.max(1, n) * 4)).subarray(0, n);
  for (const k of ISOCHROMAT_FLOAT_ARRAYS) out[k] = new Float64Array(buf(Math.max(1, n) * 8)).subarray(0, n);
  return out as IsoArrays;
}


/** Spectral peaks (Hz offset, amplitude) of one tissue at field B0. */
function tissuePeaks(fatFraction: number, model: FatModelChoice, fieldT: number): { df: number[]; amp: number[]; peak: number[] } {
  const df: number[] = [];
  const amp: number[] = [];
  const peak: number[] = [];
  if (fatFraction < 1) {
    df.push(0);
    amp.push(1 - fatFraction);
    peak.push(0);
  }
  if (fatFraction > 0) {
    if (model === "single") {
      df.push(FAT_SINGLE_PPM * 1e-6 * GAMMA_BAR * fieldT);
      amp.push(fatFraction);
      peak.push(1);
    } else {
      let sum = 0;
      for (const a of FAT_PEAKS_AMPLITUDE) sum += a;
      FAT_PEAKS_PPM.forEach((ppm, k) => {
        df.push(ppm * 1e-6 * GAMMA_BAR * fieldT);
        amp.push((fatFraction * FAT_PEAKS_AMPLITUDE[k]!) / sum);
        peak.push(k + 1);
      });
    }
  }
  return { df, amp, peak };
}

function project(bounds: { min: number[]; max: number[] }, dir: number[]): [number, number] {
  let lo = 0,
    hi = 0;
  for (let k = 0; k < 3; k++) {
    const d = dir[k]!;
    if (d === 0) continue;
    const a = bounds.min[k]! * d,
      b = bounds.max[k]! * d;
    lo += Math.min(a, b);
    hi += Math.max(a, b);
  }
  return [lo, hi];
}

/**
 * The phantom sampled on the isochromat grid, kept as cell contents, not as
 * isochromats: per column (in-plane grid position holding at least one
 * isochromat) its through-slice cells' (w index, tissue, fraction). Each
 * entry stands for one isochromat per spectral peak and T2′ bin of its tissue
 * (see {@link cellTerms}); {@link expandCells} makes them (makeIsochromats),
 * the fast readout operator folds them straight into its weights. The summary
 * fields are those of the {@link IsochromatSet} it expands to (the warnings
 * and notes arrays are the same objects).
 */
export interface IsochromatCells {
  count: number;
  columns: number;
  uGrid: Float64Array;
  vGrid: Float64Array;
  wGrid: Float64Array;
  /** Isochromats colStart[c] … colStart[c+1]−1 of the expanded set belong to column c. */
  colStart: Int32Array;
  warnings: string[];
  notes: string[];
  extent: SampledExtent;
  spreads: TissueSpread[];
  /** Grid indices (a, b) of each column. */
  colA: Int32Array;
  colB: Int32Array;
  /** Entries entStart[c] … entStart[c+1]−1 of column c: through-slice index, tissue, fraction of the cell. */
  entStart: Int32Array;
  entW: Int32Array;
  entTissue: Int32Array;
  entFrac: Float64Array;
  /** The column's place in its voxel, 0 … density²−1 (selects the T2′ bins it carries). */
  colSub: Int32Array;
  /** Whether the phantom has a B0 model (then Δf varies with position). */
  hasB0: boolean;
  /** What the expansion needs. */
  readonly ctx: CellContext;
}

/** Per-tissue tables shared by the expansion and the fast operator's fold. */
export interface CellContext {
  phantom: Phantom;
  axes: Axes;
  offsetHz: number;
  /** Δw/thickness/density²: the through-slice and in-plane share of m0. */
  wWeight: number;
  pd: number[];
  r1: number[];
  r2: number[];
  peaks: { df: number[]; amp: number[]; peak: number[] }[];
  spreadDf: Float64Array[];
  /** assign[tissue][sub]: the T2′ bins and weights of a column at that place in its voxel. */
  assign: { bins: Int32Array | number[]; weight: Float64Array | number[] }[][];
}

/** Columns per tile edge of sampleCells' classification (cells.ts cellUniform), and the tile states besides a tissue index or −1 (empty). */
const TILE = 8;
const TILE_MIXED = -2, TILE_UNKNOWN = -3;

/** Growable typed array (doubling). */
class GrowInt32 {
  n = 0;
  constructor(public a: Int32Array) {}
  /** Room for m more values (a may be a new array: read it after). */
  reserve(m: number): void {
    if (this.n + m <= this.a.length) return;
    const b = new Int32Array(Math.max(16, 2 * this.a.length, this.n + m));
    b.set(this.a.subarray(0, this.n));
    this.a = b;
  }
  push(x: number): void {
    if (this.n === this.a.length) {
      const b = new Int32Array(Math.max(16, 2 * this.a.length));
      b.set(this.a);
      this.a = b;
    }
    this.a[this.n++] = x;
  }
  /** The pushed values: a view (a copy would first-touch as many new pages again). */
  done(): Int32Array {
    return this.a.subarray(0, this.n);
  }
}

/** GrowInt32 for doubles (a class per element type: each push then sees one kind of array). */
class GrowFloat64 {
  n = 0;
  constructor(public a: Float64Array) {}
  /** Room for m more values (a may be a new array: read it after). */
  reserve(m: number): void {
    if (this.n + m <= this.a.length) return;
    const b = new Float64Array(Math.max(16, 2 * this.a.length, this.n + m));
    b.set(this.a.subarray(0, this.n));
    this.a = b;
  }
  push(x: number): void {
    if (this.n === this.a.length) {
      const b = new Float64Array(Math.max(16, 2 * this.a.length));
      b.set(this.a);
      this.a = b;
    }
    this.a[this.n++] = x;
  }
  done(): Float64Array {
    return this.a.subarray(0, this.n);
  }
}

/**
 * What {@link sampleGrid} reads: the grid, the logical axes, the cell edges (m) and per-tissue tables, as
 * typed arrays and the phantom's Shape objects (a class: the loop's code then sees the same V8 maps in every
 * run, where an object literal made per run may get a new map and send the code back to be compiled again).
 */
class GridInput {
  constructor(
    readonly shapes: Shape[],
    readonly uGrid: Float64Array,
    readonly vGrid: Float64Array,
    readonly wGrid: Float64Array,
    /** Logical read, phase and slice axes (RAS+ unit vectors), 3 numbers each. */
    readonly read: Float64Array,
    readonly phase: Float64Array,
    readonly slice: Float64Array,
    readonly e1: Float64Array,
    readonly e2: Float64Array,
    readonly e3: Float64Array,
    /** Grid index of uGrid[0] and vGrid[0] (a column's place in its voxel follows from them), isochromats per voxel edge. */
    readonly iu0: number,
    readonly iv0: number,
    readonly d: number,
    readonly sliceInvariant: boolean,
    readonly wWeight: number,
    /** Per tissue: PD; spectral peak amplitudes peakAmp[peakStart[t] … peakStart[t+1]−1]; T2′ bins at voxel place s binCount[t·d² + s]. */
    readonly pd: Float64Array,
    readonly peakStart: Int32Array,
    readonly peakAmp: Float64Array,
    readonly binCount: Int32Array,
  ) {}
}

/** What {@link sampleGrid} makes: the columns and their entries (see IsochromatCells). */
class GridCells {
  constructor(
    readonly count: number, readonly colA: Int32Array, readonly colB: Int32Array, readonly colSub: Int32Array, readonly colStart: Int32Array,
    readonly entStart: Int32Array, readonly entW: Int32Array, readonly entTissue: Int32Array, readonly entFrac: Float64Array,
  ) {}
}

/**
 * sampleCells' pass over the grid: per column (u outer, v inner) its cells' entries and isochromat counts
 * (a slice-invariant phantom: the first cell's entries repeated at every w). Tiles of TILE × TILE columns
 * at one w are classified once (cells.ts cellUniform).
 */
function sampleGrid(g: GridInput): GridCells {
  const { shapes, uGrid, vGrid, wGrid, read, phase, slice, e1, e2, e3, iu0, iv0, d, sliceInvariant, wWeight, pd, peakStart, peakAmp, binCount } = g;
  const nu = uGrid.length, nv = vGrid.length, nw = wGrid.length, dd = d * d;
  const nT = pd.length;
  const cellTissue = new Int32Array(Math.max(16, nT)), cellFrac = new Float64Array(Math.max(16, nT));
  // Capacities for a full grid (one entry per cell): only the pages written are ever touched,
  // so a generous capacity costs address space, not memory, and saves the copies of growing
  const capCols = Math.max(1024, Math.min(nu * nv + 1, 1 << 24)), capEnt = Math.max(4096, Math.min(nu * nv * nw, 1 << 25));
  const colA = new GrowInt32(new Int32Array(capCols)), colB = new GrowInt32(new Int32Array(capCols)), colSub = new GrowInt32(new Int32Array(capCols));
  const colStart = new GrowInt32(new Int32Array(capCols)), entStart = new GrowInt32(new Int32Array(capCols));
  const entW = new GrowInt32(new Int32Array(capEnt)), entTissue = new GrowInt32(new Int32Array(capEnt)), entFrac = new GrowFloat64(new Float64Array(capEnt));
  colStart.push(0);
  entStart.push(0);
  let at = 0;
  // a slice-invariant phantom: the entries of a column's first cell, repeated at every w
  const keptTissue = new Int32Array(cellTissue.length), keptFrac = new Float64Array(cellTissue.length);
  // per tile of columns (index ⌊b/TILE⌋·nw + w index) along the current tile row ⌊a/TILE⌋: cellUniform's answer
  const tileOf = new Int32Array(Math.ceil(nv / TILE) * nw);
  const e1t = new Float64Array(3), e2t = new Float64Array(3);
  for (let a = 0; a < nu; a++) {
    const u = uGrid[a]!;
    if (a % TILE === 0) tileOf.fill(TILE_UNKNOWN);
    const subA = (((iu0 + a) % d) + d) % d;
    for (let b = 0; b < nv; b++) {
      const v = vGrid[b]!;
      const startAt = at, startEnt = entW.n;
      const sub = subA + d * ((((iv0 + b) % d) + d) % d); // this column's place in its voxel
      let kept = 0, keptHere = 0;
      for (let c = 0; c < nw; c++) {
        if (sliceInvariant && c > 0) {
          // the first cell's entries at every further w, written straight into room made once
          const m = (nw - c) * kept;
          entW.reserve(m);
          entTissue.reserve(m);
          entFrac.reserve(m);
          const ew = entW.a, et = entTissue.a, ef = entFrac.a;
          let n = entW.n;
          for (let cc = c; cc < nw; cc++) {
            for (let k = 0; k < kept; k++, n++) {
              ew[n] = cc;
              et[n] = keptTissue[k]!;
              ef[n] = keptFrac[k]!;
            }
          }
          entW.n = entTissue.n = entFrac.n = n;
          at += keptHere * (nw - c);
          break;
        }
        const w = wGrid[c]!;
        // the tile of TILE × TILE columns around this cell at this w, classified once: certainly one tissue
        // (or empty) gives every cell of it that tissue at fraction 1 (or nothing), as cellContents would
        const ti = ((b / TILE) | 0) * nw + c;
        if (tileOf[ti] === TILE_UNKNOWN) {
          const a0 = a - (a % TILE), a1 = Math.min(nu, a0 + TILE), b0 = b - (b % TILE), b1 = Math.min(nv, b0 + TILE);
          if ((a1 - a0) * (b1 - b0) === 1) tileOf[ti] = TILE_MIXED;
          else {
            const tu = 0.5 * (uGrid[a0]! + uGrid[a1 - 1]!), tv = 0.5 * (vGrid[b0]! + vGrid[b1 - 1]!);
            for (let q = 0; q < 3; q++) {
              e1t[q] = e1[q]! * (a1 - a0);
              e2t[q] = e2[q]! * (b1 - b0);
            }
            tileOf[ti] = shapeCellUniform(
              shapes,
              read[0]! * tu + phase[0]! * tv + slice[0]! * w,
              read[1]! * tu + phase[1]! * tv + slice[1]! * w,
              read[2]! * tu + phase[2]! * tv + slice[2]! * w,
              e1t, e2t, e3,
            );
          }
        }
        const uniform = tileOf[ti]!;
        let n: number;
        if (uniform >= -1) {
          n = uniform >= 0 ? 1 : 0;
          cellTissue[0] = uniform;
          cellFrac[0] = 1;
        } else {
          n = shapeCellContents(
            shapes, nT,
            read[0]! * u + phase[0]! * v + slice[0]! * w,
            read[1]! * u + phase[1]! * v + slice[1]! * w,
            read[2]! * u + phase[2]! * v + slice[2]! * w,
            e1, e2, e3, cellTissue, cellFrac,
          );
        }
        for (let k = 0; k < n; k++) {
          const t = cellTissue[k]!, frac = cellFrac[k]!;
          const bins = binCount[t * dd + sub]!;
          let here = 0;
          for (let q = peakStart[t]!; q < peakStart[t + 1]!; q++) {
            const m0 = pd[t]! * frac * peakAmp[q]! * wWeight;
            if (m0 !== 0) here += bins;
          }
          if (here === 0) continue;
          at += here;
          entW.push(c);
          entTissue.push(t);
          entFrac.push(frac);
          keptTissue[kept] = t;
          keptFrac[kept++] = frac;
          keptHere += here;
        }
      }
      if (at > startAt) {
        colA.push(a);
        colB.push(b);
        colSub.push(sub);
        colStart.push(at);
        entStart.push(entW.n);
      } else entW.n = entTissue.n = entFrac.n = startEnt;
    }
  }
  return new GridCells(at, colA.done(), colB.done(), colSub.done(), colStart.done(), entStart.done(), entW.done(), entTissue.done(), entFrac.done());
}

/**
 * Samples the phantom into cell contents (one call of cellContents per cell,
 * nothing per isochromat): the one sampling loop behind makeIsochromats and
 * the fast operator, so the two cannot drift.
 */
export function sampleCells(ph: Phantom, geo: IsoGeometry, fieldT: number, opt: IsochromatOptions): IsochromatCells {
  const { axes, dx, dy, thickness, position } = geo;
  const d = opt.density;
  const du = dx / d,
    dv = dy / d;
  const warnings: string[] = [];
  const bounds = phantomBounds(ph);
  let [u0, u1] = project(bounds, axes.read);
  let [v0, v1] = project(bounds, axes.phase);
  const notes: string[] = [];
  const cm = (x: number) => `${(x * 100).toFixed(1)} cm`;
  /** Shapes whose projection on `dir` reaches beyond ±lim, by label or kind and index. */
  const beyond = (dir: number[], lim: number): string[] =>
    ph.shapes.flatMap((sh, i) => {
      const [a, b] = project(sh.bounds(), dir);
      return a < -lim || b > lim ? [sh.label ? `"${sh.label}"` : `${sh.type} #${i + 1} (${ph.tissues[sh.tissue]?.name ?? "?"})`] : [];
    });
  const limit = (name: "read" | "phase", lo: number, hi: number, clip: number, unbounded: number | undefined, dir: number[], stopBand: boolean): [number, number] => {
    if (!(lo < hi)) return [lo, hi];
    let lim = clip;
    const open = !Number.isFinite(lo) || !Number.isFinite(hi);
    if (open) lim = Math.min(lim, unbounded ?? (Number.isFinite(clip) ? clip : 1.5));
    if (lo >= -lim && hi <= lim) return [lo, hi];
    const shapes = beyond(dir, lim).join(", ");
    const reach = open ? "unbounded" : `${cm(lo)} … ${cm(hi)}`;
    if (lo > lim || hi < -lim) {
      // the whole phantom lies beyond the sampled range: no isochromat could be made
      const why = stopBand ? ", where the receiver filter passes no signal" : ", the range sampled";
      throw new UserError(
        `along ${name} the phantom lies at ${reach}, wholly beyond ±${cm(lim)}${why}, so nothing of it reaches the image; ` +
          `move the shapes toward the isocentre or widen fov.${name}` + (stopBand ? ` (or set receiverFilter false to let it wrap)` : ""),
      );
    }
    if (stopBand && !open) {
      notes.push(`along ${name} the phantom reaches ${reach}; sampled within ±${cm(lim)}, where the receiver filter still passes signal (${shapes} extend beyond it)`);
    } else {
      warnings.push(
        `along ${name} the phantom reaches ${reach} but is sampled only within ±${cm(lim)}: tissue of ${shapes} beyond that is left out and cannot wrap into the image` +
          (open ? " (a 2D shape is infinite along z: use 3D shapes of finite length)" : ""),
      );
    }
    return [Math.max(lo, -lim), Math.min(hi, lim)];
  };
  [u0, u1] = limit("read", u0, u1, geo.clipRead, geo.unboundedRead, axes.read, geo.readStopBand === true);
  [v0, v1] = limit("phase", v0, v1, geo.clipPhase, geo.unboundedPhase, axes.phase, false);
  // Grid index i ↦ u = (i + 0.5)·du − dx/2, so the d isochromats of pixel n sit symmetrically about n·dx.
  const iu0 = Math.floor((u0 + dx / 2) / du) - 1;
  const iu1 = Math.ceil((u1 + dx / 2) / du) + 1;
  const iv0 = Math.floor((v0 + dy / 2) / dv) - 1;
  const iv1 = Math.ceil((v1 + dy / 2) / dv) + 1;
  const nu = iu1 - iu0,
    nv = iv1 - iv0,
    nw = opt.sliceCount;
  const uGrid = new Float64Array(nu);
  const vGrid = new Float64Array(nv);
  const wGrid = new Float64Array(nw);
  for (let i = 0; i < nu; i++) uGrid[i] = (iu0 + i + 0.5) * du - dx / 2;
  for (let i = 0; i < nv; i++) vGrid[i] = (iv0 + i + 0.5) * dv - dy / 2;
  const span = opt.sliceExtent * thickness;
  const dw = span / nw;
  for (let i = 0; i < nw; i++) wGrid[i] = position - span / 2 + (i + 0.5) * dw;

  // A phantom whose shapes are all infinite along the slice normal (2D shapes: prisms along z) looks the
  // same at every w. Every shape, not the union's bounds: one 2D shape makes the union infinite along z, and
  // a sphere or box beside it still changes along the slice.
  const sliceInvariant = (axes.slice[2] === 1 || axes.slice[2] === -1) && ph.shapes.every((s) => s.is2D);

  const peaks = ph.tissues.map((t) => tissuePeaks(t.fatFraction, t.fatModel ?? opt.fatModel, fieldT));
  // T2′ spread per tissue: the same frequency set in every voxel, so RF classes stay few.
  const spreadN = Math.max(1, Math.round(opt.t2primeIsochromats ?? DEFAULT_T2PRIME_ISOCHROMATS));
  // a tissue with T2′ in closed form has no spread and decays with R2* = R2 + R2′ (r2Of below)
  const closed = ph.tissues.map((t, i) => opt.t2primeClosed?.[i] === true && r2prime(t.t2, t.t2star) > 0);
  const spreadOf: Spread[] = ph.tissues.map((t, i) => (closed[i] ? NO_SPREAD : lorentzianSpread(r2prime(t.t2, t.t2star), spreadN)));
  const assign = spreadOf.map((sp) => spreadAssignment(sp, d * d));
  const spreads: TissueSpread[] = ph.tissues.map((t, i) => {
    const r = r2prime(t.t2, t.t2star);
    return { tissue: t.name, t2prime: r > 0 ? 1 / r : Infinity, count: spreadOf[i]!.df.length, closedForm: closed[i]! };
  });
  const offsetHz = opt.offsetHz ?? 0;
  if (spreadN === 1) {
    const short = spreads.filter((s) => Number.isFinite(s.t2prime) && !s.closedForm).map((s) => s.tissue);
    if (short.length) warnings.push(`T2* below T2 is not modelled (no T2′ spread: --t2prime-isochromats 1) for ${short.join(", ")}; these decay with T2 only`);
  }
  const wWeight = dw / thickness / (d * d);

  const e1 = [axes.read[0] * du, axes.read[1] * du, axes.read[2] * du];
  const e2 = [axes.phase[0] * dv, axes.phase[1] * dv, axes.phase[2] * dv];
  const e3 = [axes.slice[0] * dw, axes.slice[1] * dw, axes.slice[2] * dw];
  const inv = (t: number) => (Number.isFinite(t) && t > 0 ? 1 / t : 0);
  const r1Of = ph.tissues.map((t) => inv(t.t1)), r2Of = ph.tissues.map((t, i) => inv(t.t2) + (closed[i] ? r2prime(t.t2, t.t2star) : 0));

  // One pass over the grid: per column its cells' contents; the isochromat
  // count per column follows from them (one per peak of m0 ≠ 0 and T2′ bin).
  // The loop is a function of its own over typed arrays and numbers (sampleGrid): it is the
  // only hot code here, so its optimised code stays valid from run to run
  const nT = ph.tissues.length, dd = d * d;
  const peakStart = new Int32Array(nT + 1);
  for (let t = 0; t < nT; t++) peakStart[t + 1] = peakStart[t]! + peaks[t]!.amp.length;
  const peakAmp = new Float64Array(peakStart[nT]!);
  for (let t = 0; t < nT; t++) peakAmp.set(peaks[t]!.amp, peakStart[t]!);
  const binCount = new Int32Array(nT * dd);
  for (let t = 0; t < nT; t++) for (let s = 0; s < dd; s++) binCount[t * dd + s] = assign[t]![s]!.bins.length;
  const out = sampleGrid(new GridInput(
    ph.shapes, uGrid, vGrid, wGrid, Float64Array.from(axes.read), Float64Array.from(axes.phase), Float64Array.from(axes.slice),
    Float64Array.from(e1), Float64Array.from(e2), Float64Array.from(e3),
    iu0, iv0, d, sliceInvariant, wWeight, Float64Array.from(ph.tissues, (t) => t.pd), peakStart, peakAmp, binCount,
  ));
  const ctx: CellContext = {
    phantom: ph, axes, offsetHz, wWeight, pd: ph.tissues.map((t) => t.pd), r1: r1Of, r2: r2Of, peaks,
    spreadDf: spreadOf.map((s) => s.df), assign: assign as CellContext["assign"],
  };
  return {
    count: out.count, columns: out.colA.length, uGrid, vGrid, wGrid, colStart: out.colStart, warnings, notes,
    extent: {
      read: [nu > 0 ? uGrid[0]! - du / 2 : 0, nu > 0 ? uGrid[nu - 1]! + du / 2 : 0],
      phase: [nv > 0 ? vGrid[0]! - dv / 2 : 0, nv > 0 ? vGrid[nv - 1]! + dv / 2 : 0],
      slice: [position - span / 2, position + span / 2],
    },
    spreads,
    colA: out.colA, colB: out.colB, colSub: out.colSub, entStart: out.entStart, entW: out.entW, entTissue: out.entTissue, entFrac: out.entFrac,
    hasB0: ph.b0 !== null && ph.b0 !== undefined,
    ctx,
  };
}

/**
 * The isochromats of one cell entry's tissue at voxel place `sub`, in the
 * expansion's order (peak, then T2′ bin): for each, the peak index q, the
 * factor f with m0 = (pd·fraction·amp_q·wWeight)·weight_j = f·pd·fraction
 * (up to rounding), and Δf without the B0 model (offset + chemical shift +
 * spread). Entries whose peak m0 would be 0 are left out as in the
 * expansion (only pd·fraction = 0 or amp = 0 make it so; pd·fraction ≠ 0 for
 * a stored entry).
 */
export function cellTerms(ctx: CellContext, ti: number, sub: number): { q: number[]; peak: number[]; f: number[]; df: number[]; bin: number[] } {
  const pk = ctx.peaks[ti]!, as = ctx.assign[ti]![sub]!, sdf = ctx.spreadDf[ti]!;
  const out = { q: [] as number[], peak: [] as number[], f: [] as number[], df: [] as number[], bin: [] as number[] };
  for (let q = 0; q < pk.df.length; q++) {
    if (pk.amp[q]! * ctx.wWeight === 0) continue;
    for (let j = 0; j < as.bins.length; j++) {
      out.q.push(q);
      out.peak.push(pk.peak[q]!);
      out.f.push(pk.amp[q]! * ctx.wWeight * as.weight[j]!);
      out.df.push(ctx.offsetHz + pk.df[q]! + sdf[as.bins[j]!]!);
      out.bin.push(as.bins[j]!);
    }
  }
  return out;
}

/** The isochromats of sampled cells, stored one by one (arrays of the final size in shared memory). */
export function expandCells(cells: IsochromatCells): IsochromatSet {
  const { ctx, uGrid, vGrid, wGrid } = cells;
  const ph = ctx.phantom, axes = ctx.axes, offsetHz = ctx.offsetHz, wWeight = ctx.wWeight;
  const A = allocate(cells.count);
  const r = [0, 0, 0];
  let at = 0;
  for (let col = 0; col < cells.columns; col++) {
    const a = cells.colA[col]!, b = cells.colB[col]!, sub = cells.colSub[col]!;
    const u = uGrid[a]!, v = vGrid[b]!;
    // The engine finds readout groups and RF classes by hashing, so the order
    // within a column is free: w outermost, then tissue, peak and T2′ bin.
    for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
      const c = cells.entW[e]!, ti = cells.entTissue[e]!, frac = cells.entFrac[e]!;
      const w = wGrid[c]!;
      r[0] = axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * w;
      r[1] = axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * w;
      r[2] = axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * w;
      const b0 = ph.b0 ? ph.b0(r[0]!, r[1]!, r[2]!) + offsetHz : offsetHz;
      const t = ph.tissues[ti]!;
      const pk = ctx.peaks[ti]!;
      const as = ctx.assign[ti]![sub]!;
      const bins = as.bins, weight = as.weight;
      const sdf = ctx.spreadDf[ti]!;
      for (let q = 0; q < pk.df.length; q++) {
        const m0 = t.pd * frac * pk.amp[q]! * wWeight;
        if (m0 === 0) continue;
        for (let j = 0; j < bins.length; j++) {
          A.iu[at] = a; A.iv[at] = b; A.iw[at] = c;
          A.x[at] = r[0]!; A.y[at] = r[1]!; A.z[at] = r[2]!;
          A.m0[at] = m0 * weight[j]!; A.r1[at] = ctx.r1[ti]!; A.r2[at] = ctx.r2[ti]!;
          A.df[at] = b0 + pk.df[q]! + sdf[bins[j]!]!;
          A.tissue[at] = ti; A.peak[at] = pk.peak[q]!;
          at++;
        }
      }
    }
  }
  if (at !== cells.count) throw new Error(`isochromats: expanded ${at}, counted ${cells.count}`);
  return {
    count: at, uGrid, vGrid, wGrid, ...A, colStart: cells.colStart, columns: cells.columns,
    warnings: cells.warnings, notes: cells.notes, extent: cells.extent, spreads: cells.spreads,
  };
}

/** Physical centres (m) of every sampled cell (column × through-slice index with tissue), where its isochromats sit. */
export function cellCentres(cells: IsochromatCells): { x: Float64Array; y: Float64Array; z: Float64Array; count: number } {
  const n = cells.entW.length, x = new Float64Array(n), y = new Float64Array(n), z = new Float64Array(n), axes = cells.ctx.axes;
  for (let col = 0; col < cells.columns; col++) {
    const u = cells.uGrid[cells.colA[col]!]!, v = cells.vGrid[cells.colB[col]!]!;
    for (let e = cells.entStart[col]!; e < cells.entStart[col + 1]!; e++) {
      const w = cells.wGrid[cells.entW[e]!]!;
      x[e] = axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * w;
      y[e] = axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * w;
      z[e] = axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * w;
    }
  }
  return { x, y, z, count: n };
}

/**
 * Samples the phantom. `fieldT` sets chemical shifts; the phantom's B0 model
 * (if any) adds its offset at each isochromat's physical position.
 */
export function makeIsochromats(ph: Phantom, geo: IsoGeometry, fieldT: number, opt: IsochromatOptions): IsochromatSet {
  return expandCells(sampleCells(ph, geo, fieldT, opt));
}

/**
 * One column of isochromats at the in-plane centre (u = v = 0), `sliceCount`
 * through the slice over `sliceExtent` thicknesses, shifted by `shift` grid
 * steps (e.g. ½ for the half-step check), one isochromat per tissue per w on
 * resonance plus `offsetHz`. A probe for checks of the through-slice
 * sampling; m0 = pd·Δw/thickness, so an ideal rectangular slice gives pd.
 */
export function probeColumn(
  tissues: { pd: number; t1: number; t2: number }[], axes: Axes, thickness: number, position: number,
  sliceCount: number, sliceExtent: number, offsetHz: number, shift = 0,
): IsochromatSet {
  const nw = sliceCount, nt = tissues.length, n = nw * nt;
  const A = allocate(n);
  const span = sliceExtent * thickness, dw = span / nw;
  const wGrid = new Float64Array(nw);
  for (let i = 0; i < nw; i++) wGrid[i] = position - span / 2 + (i + 0.5 + shift) * dw;
  const inv = (t: number) => (Number.isFinite(t) && t > 0 ? 1 / t : 0);
  let at = 0;
  for (let c = 0; c < nw; c++) {
    for (let t = 0; t < nt; t++) {
      const w = wGrid[c]!;
      A.iu[at] = 0; A.iv[at] = 0; A.iw[at] = c;
      A.x[at] = axes.slice[0] * w; A.y[at] = axes.slice[1] * w; A.z[at] = axes.slice[2] * w;
      A.m0[at] = (tissues[t]!.pd * dw) / thickness; A.r1[at] = inv(tissues[t]!.t1); A.r2[at] = inv(tissues[t]!.t2);
      A.df[at] = offsetHz; A.tissue[at] = t; A.peak[at] = 0;
      at++;
    }
  }
  return {
    count: n, uGrid: new Float64Array([0]), vGrid: new Float64Array([0]), wGrid, ...A,
    colStart: Int32Array.from([0, n]), columns: 1, warnings: [], notes: [],
    extent: { read: [0, 0], phase: [0, 0], slice: [wGrid[0]! - dw / 2, wGrid[nw - 1]! + dw / 2] },
    spreads: tissues.map((_, i) => ({ tissue: String(i), t2prime: Infinity, count: 1, closedForm: false })),
  };
}
