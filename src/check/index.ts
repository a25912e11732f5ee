/**
 * `isofold check`: answers from closed forms only, no simulation. For a
 * phantom and a protocol it predicts the fat shift, wrap, blur, distortion
 * and cost, and judges each value against a stated, changeable threshold.
 * Results are plain data (CheckResult) for the CLI, report pages and sweeps.
 *
 * Every prediction reuses the project's shared closed forms: the fat-shift
 * and off-resonance displacement of analysis/fatshift.ts, the sequence's
 * derived quantities (bandwidths, echo spacing, gradient demand, SNR, scan
 * time), the sequence's per-line echo times; wrap from ./wrap.ts, blur from
 * ./psf.ts.
 */
import { fatShiftInput, multiPeakMeanPpm, predictFatShift, predictOffResonanceShift, type AxisShift } from "../analysis/index.js";
import { FAT_SINGLE_PPM, GAMMA_BAR, SNR_FIELD_EXPONENT } from "../constants.js";
import { UserError } from "../errors.js";
import { parsePhantom, type Phantom, type Shape } from "../phantom/index.js";
import { sequenceDefinition } from "../sequence/index.js";
import { logicalAxes, slicePositions, toPhysical, type Axes, type Protocol } from "../protocol/index.js";
import type { Sequence } from "../sequence/index.js";
import { fwhmGradientEcho, fwhmSampled, fwhmSpinEcho, SINC_FWHM } from "./psf.js";
import { DEFAULT_THRESHOLDS, judge, thresholdText, type Threshold, type Verdict } from "./thresholds.js";
import { displayedIndex, foldPx, insideAcquired, insideDisplayed, minFovNoWrap, minOversamplingNoWrap, phaseLinesFor } from "./wrap.js";

export { DEFAULT_THRESHOLDS, parseThresholds, judge, thresholdText, type Threshold, type Verdict } from "./thresholds.js";
export * from "./wrap.js";
export * from "./psf.js";

export const CHECK_SAFETY_NOTE =
  "Gradient and slew headroom is against the hardware values entered only: it is not a nerve-stimulation, SAR (RF heating) or acoustic-noise check. " +
  "isofold is not a medical device; defer to the scanner's own safety system, local regulations and licensed practice.";

export type CheckGroup = "fat shift" | "wrap" | "blur" | "distortion" | "cost";

export interface CheckItem {
  key: string;
  group: CheckGroup;
  label: string;
  /** The judged value in `unit` (null when it does not apply). */
  value: number | null;
  unit: string;
  verdict: Verdict;
  threshold: Threshold & { text: string };
  /** One line: why, with the numbers behind the value. */
  reason: string;
  /** Extra numbers (SI unless named otherwise). */
  detail?: Record<string, unknown>;
}

/** A shape's signal that folds along one axis and lands in the image. */
export interface FoldedShape {
  shape: string;
  tissue: string;
  /** Side of the FOV the signal leaves from, as a physical direction, e.g. "+y". */
  from: string;
  /** Extent of the shape beyond the acquired FOV edge (m). */
  beyondEdge: number;
  /** Landing range in the displayed image: pixel indices (first, last row or column whose centre it covers) and positions (m). */
  landsPx: [number, number] | null;
  landsM: [number, number] | null;
  /** Rows (columns) of the image it lands on. */
  landsRows: number;
  /** Pixels of the ROI it lands on (summed over the sampled planes, per plane on average). */
  roiPixels: number;
}

export interface AxisWrap {
  axis: "phase" | "read" | "slice";
  direction: string;
  fov: number;
  fovAcquired: number;
  /** Signal extent of the phantom in the imaged slab along the axis (m, signed). */
  extent: [number, number] | null;
  folded: FoldedShape[];
  /** Rows (columns) of the image receiving folded signal; pixels of the ROI receiving it. */
  rows: number;
  roiPixels: number;
  /** Smallest FOV (m) and oversampling (fraction) at which nothing folds into the image; null when not applicable. */
  minFov: number | null;
  minOversampling: number | null;
  note: string;
}

export interface CheckResult {
  sequence: string;
  axes: { read: string; phase: string; slice: string };
  roi: string;
  items: CheckItem[];
  wrap: { phase: AxisWrap; read: AxisWrap; slice: AxisWrap | null };
  /** What may make the answers (or a simulation of them) wrong: the protocol's and the phantom's warnings, as `simulate` prints them. */
  warnings: string[];
  /** What helps to read them. */
  notes: string[];
  safety: string;
}

export interface CheckOptions {
  /** The ROI as a phantom shape (physical coordinates); default: the central half of the FOV. */
  roi?: Shape | null;
  /** Its text as given, for the report. */
  roiText?: string;
  thresholds?: Record<string, Threshold>;
  /** Reference protocol's sequence for the relative SNR (default: the built-in reference of `relativeSnr`). */
  reference?: { name: string; seq: Sequence; field?: number } | null;
  /** Points per in-plane axis at most when sampling the phantom (default 320). */
  maxPoints?: number;
}

/**
 * Parses an ROI given as one shape in the phantom file's syntax, e.g.
 * {"shape":"ellipse","center":["0 cm","2 cm"],"semiAxes":["3 cm","2 cm"]}; a
 * "tissue" is not needed.
 */
export function parseRoi(text: string): Shape {
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch {
    throw new UserError(`--roi: not valid JSON; give one shape in the phantom's syntax, e.g. '{"shape":"ellipse","center":["0 cm","0 cm"],"semiAxes":["4 cm","3 cm"]}'`);
  }
  if (typeof raw !== "object" || raw === null || Array.isArray(raw)) {
    throw new UserError(`--roi: expected one shape object in the phantom's syntax, e.g. '{"shape":"rectangle","center":["0 cm","0 cm"],"size":["6 cm","4 cm"]}'`);
  }
  const shape = { tissue: "roi", ...(raw as Record<string, unknown>) };
  try {
    const ph = parsePhantom(
      { name: "roi", tissues: { roi: { pd: 1, t1: "1 s", t2: "0.1 s", t2star: "0.1 s", species: "water" } }, shapes: [shape] },
      "--roi", 1.5,
    );
    return ph.shapes[0]!;
  } catch (e) {
    if (e instanceof UserError) throw new UserError(`--roi: ${e.detail.replace(/^shapes\[0\]\.?/, "")}${e.keyPath ? ` (at ${e.keyPath.replace(/^shapes\[0\]\.?/, "") || "the shape"})` : ""}`);
    throw e;
  }
}

function item(key: string, group: CheckGroup, label: string, value: number | null, thresholds: Record<string, Threshold>, reason: string, detail?: Record<string, unknown>): CheckItem {
  const t = thresholds[key] ?? DEFAULT_THRESHOLDS[key]!;
  return {
    key, group, label, value, unit: t.unit, verdict: judge(value, t),
    threshold: { ...t, text: thresholdText(t) }, reason, ...(detail ? { detail } : {}),
  };
}

const f1 = (v: number) => (Math.abs(v) >= 100 ? v.toFixed(0) : Math.abs(v) >= 10 ? v.toFixed(1) : v.toFixed(2));
const mm = (m: number) => `${f1(m * 1e3)} mm`;
const cm = (m: number) => `${(m * 100).toFixed(1)} cm`;
/** A smallest length that works, rounded up to the 0.1 cm shown (rounding it to nearest could name one that still folds). */
const cmAtLeast = (m: number) => `${(Math.ceil(m * 1000 - 1e-6) / 10).toFixed(1)} cm`;

function signedDir(v: number, axis: string): string {
  return v === 0 ? "none" : `${v > 0 ? "+" : "-"}${axis}`;
}

// ---- sampling the phantom in the imaged slab ----

interface SlabPlane {
  /** Slice-normal coordinate (m) of the plane. */
  w: number;
}

interface Sampling {
  hu: number;
  hv: number;
  u0: number;
  u1: number;
  v0: number;
  v1: number;
  planes: SlabPlane[];
}

/** Per phantom: each shape's bounding box (x0, x1, y0, y1, z0, z1) and whether its tissue has signal (pd > 0). */
const BOXES = new WeakMap<Phantom, { box: Float64Array; signal: Uint8Array }>();

function shapeBoxes(ph: Phantom): { box: Float64Array; signal: Uint8Array } {
  let b = BOXES.get(ph);
  if (!b) {
    const box = new Float64Array(ph.shapes.length * 6);
    ph.shapes.forEach((sh, k) => {
      const bb = sh.bounds();
      box.set([bb.min[0], bb.max[0], bb.min[1], bb.max[1], bb.min[2], bb.max[2]], k * 6);
    });
    b = { box, signal: Uint8Array.from(ph.shapes, (sh) => (ph.tissues[sh.tissue]!.pd > 0 ? 1 : 0)) };
    BOXES.set(ph, b);
  }
  return b;
}

/**
 * Index of the shape whose tissue gives the signal at a point (later shapes paint over earlier ones), or −1;
 * `box` and `signal` from shapeBoxes (arrays only: hot loops keep their optimised code from run to run).
 */
function ownerIn(shapes: Shape[], box: Float64Array, signal: Uint8Array, x: number, y: number, z: number): number {
  for (let s = shapes.length - 1; s >= 0; s--) {
    const o = s * 6;
    if (x < box[o]! || x > box[o + 1]! || y < box[o + 2]! || y > box[o + 3]! || z < box[o + 4]! || z > box[o + 5]!) continue;
    if (shapes[s]!.contains(x, y, z)) return signal[s] === 1 ? s : -1;
  }
  return -1;
}

/** Index of the shape whose tissue gives the signal at a point (later shapes paint over earlier ones), or −1. */
function ownerAt(ph: Phantom, x: number, y: number, z: number): number {
  const b = shapeBoxes(ph);
  return ownerIn(ph.shapes, b.box, b.signal, x, y, z);
}

/** Where the signal of one shape leaving the acquired FOV on one side lands (see FoldedShape). */
type Acc = { lo: number; hi: number; beyond: number; roi: number; rows: Set<number> };

/**
 * What {@link scanSlab} reads: numbers, typed arrays, the Shape objects and two functions (a class: the
 * loop's code sees the same V8 maps in every run, where an object literal made per run may get a new map and
 * send the code back to be compiled again).
 */
class SlabScanInput {
  constructor(
    readonly shapes: Shape[],
    /** shapeBoxes of the phantom. */
    readonly box: Float64Array,
    readonly signal: Uint8Array,
    /** The phantom's B0 model (Hz at a point, m) or null. */
    readonly b0: ((x: number, y: number, z: number) => number) | null,
    /** Logical read, phase and slice axes (RAS+ unit vectors) one after another, 9 numbers. */
    readonly axes: Float64Array,
    /** Slice-normal coordinate (m) of each sampled plane. */
    readonly planes: Float64Array,
    readonly u0: number,
    readonly u1: number,
    readonly v0: number,
    readonly v1: number,
    readonly hu: number,
    readonly hv: number,
    readonly dx: number,
    readonly dy: number,
    /** Acquired (L) and displayed (M) points along phase and read; the receiver filter's state; the shim (Hz). */
    readonly Lp: number,
    readonly Lr: number,
    readonly Mp: number,
    readonly Mr: number,
    readonly filter: boolean,
    readonly shim: number,
    /** Whether a point (logical u, v in the plane at w) lies in the ROI. */
    readonly inRoi: (u: number, v: number, w: number) => boolean,
  ) {}
}

/** What {@link scanSlab} finds (see checkProtocol). */
class SlabScan {
  constructor(
    readonly tissuesPresent: Set<number>,
    readonly vMin: number, readonly vMax: number, readonly vMinAt: [number, number], readonly vMaxAt: [number, number],
    readonly uMin: number, readonly uMax: number,
    readonly dfMin: number, readonly dfMax: number, readonly dfSum: number, readonly nSig: number,
    readonly phaseAcc: Map<number, Acc>, readonly readAcc: Map<number, Acc>, readonly phaseRows: Set<number>, readonly readRows: Set<number>,
    readonly phaseRoi: number, readonly readRoi: number, readonly filterDim: Set<number>,
  ) {}
}

/**
 * checkProtocol's one pass over the sampled points of the imaged slab: the
 * tissues present, the signal's extent and off-resonance, and where signal
 * beyond the acquired FOV folds (per shape and side). A function of its own,
 * so that the optimised code of this, the only hot loop of the check, stays
 * valid from run to run.
 */
function scanSlab(g: SlabScanInput): SlabScan {
  const { shapes, box, signal, axes, planes, u0, u1, v0, v1, hu, hv, dx, dy, Lp, Lr, Mp, Mr, inRoi } = g;
  const fOn = g.filter;
  const r0 = axes[0]!, r1 = axes[1]!, r2 = axes[2]!, p0 = axes[3]!, p1 = axes[4]!, p2 = axes[5]!, s0 = axes[6]!, s1 = axes[7]!, s2 = axes[8]!;
  const tissuesPresent = new Set<number>();
  let vMin = Infinity, vMax = -Infinity, uMin = Infinity, uMax = -Infinity;
  let vMinAt: [number, number] = [0, 0], vMaxAt: [number, number] = [0, 0];
  let dfMin = Infinity, dfMax = -Infinity, dfSum = 0, nSig = 0;
  const phaseAcc = new Map<number, Acc>(), readAcc = new Map<number, Acc>();
  const phaseRows = new Set<number>(), readRows = new Set<number>();
  let phaseRoi = 0, readRoi = 0;
  const filterDim = new Set<number>();
  // the receiver filter rolls off from 0.42 of the sampled bandwidth (engine/readout.ts, receiverFilter)
  const filterEdgePx = 0.42 * Lr;
  // key: 2·shape + (1 when leaving toward the positive side)
  const acc = (m: Map<number, Acc>, key: number): Acc => {
    let a = m.get(key);
    if (!a) { a = { lo: Infinity, hi: -Infinity, beyond: 0, roi: 0, rows: new Set() }; m.set(key, a); }
    return a;
  };
  const nu = Math.max(1, Math.ceil((u1 - u0) / hu)), nv = Math.max(1, Math.ceil((v1 - v0) / hv));
  const cellPx = (hu * hv) / (dx * dy) / planes.length;
  const edgeHiP = Lp - Math.floor(Lp / 2) - 0.5, edgeLoP = -Math.floor(Lp / 2) - 0.5;
  const edgeHiR = Lr - Math.floor(Lr / 2) - 0.5, edgeLoR = -Math.floor(Lr / 2) - 0.5;
  const b0 = g.b0, shim = g.shim;
  for (let k = 0; k < planes.length; k++) {
    const w = planes[k]!;
    for (let j = 0; j <= nv; j++) {
      const v = v0 + Math.min(j * hv, v1 - v0);
      for (let i = 0; i <= nu; i++) {
        const u = u0 + Math.min(i * hu, u1 - u0);
        // the point's physical position, as toPhysical (protocol/geometry.ts)
        const x = r0 * u + p0 * v + s0 * w, y = r1 * u + p1 * v + s1 * w, z = r2 * u + p2 * v + s2 * w;
        const s = ownerIn(shapes, box, signal, x, y, z);
        if (s < 0) continue;
        tissuesPresent.add(shapes[s]!.tissue);
        if (v < vMin) { vMin = v; vMinAt = [u, w]; }
        if (v > vMax) { vMax = v; vMaxAt = [u, w]; }
        uMin = Math.min(uMin, u); uMax = Math.max(uMax, u);
        const df = (b0 ? b0(x, y, z) : 0) + shim;
        dfMin = Math.min(dfMin, df); dfMax = Math.max(dfMax, df); dfSum += df; nSig++;
        // phase
        const pv = v / dy;
        if (!insideAcquired(pv, Lp)) {
          const a = acc(phaseAcc, 2 * s + (pv > 0 ? 1 : 0));
          a.beyond = Math.max(a.beyond, pv > 0 ? (pv - edgeHiP) * dy : (edgeLoP - pv) * dy);
          const f = foldPx(pv, Lp);
          if (insideDisplayed(f, Mp)) {
            a.lo = Math.min(a.lo, f); a.hi = Math.max(a.hi, f);
            const row = Math.round(displayedIndex(f, Mp));
            a.rows.add(row); phaseRows.add(row);
            if (inRoi(u, f * dy, w)) { a.roi += cellPx; phaseRoi += cellPx; }
          }
        }
        // read (folds only without the receiver filter)
        const pu = u / dx;
        if (!fOn && !insideAcquired(pu, Lr)) {
          const a = acc(readAcc, 2 * s + (pu > 0 ? 1 : 0));
          a.beyond = Math.max(a.beyond, pu > 0 ? (pu - edgeHiR) * dx : (edgeLoR - pu) * dx);
          const f = foldPx(pu, Lr);
          if (insideDisplayed(f, Mr)) {
            a.lo = Math.min(a.lo, f); a.hi = Math.max(a.hi, f);
            const col = Math.round(displayedIndex(f, Mr));
            a.rows.add(col); readRows.add(col);
            if (inRoi(f * dx, v, w)) { a.roi += cellPx; readRoi += cellPx; }
          }
        } else if (fOn && Math.abs(pu) > filterEdgePx && insideDisplayed(pu, Mr)) {
          filterDim.add(Math.round(displayedIndex(pu, Mr)));
        }
      }
    }
  }
  return new SlabScan(tissuesPresent, vMin, vMax, vMinAt, vMaxAt, uMin, uMax, dfMin, dfMax, dfSum, nSig, phaseAcc, readAcc, phaseRows, readRows, phaseRoi, readRoi, filterDim);
}

/**
 * Extent of the phantom along the logical read and phase axes (m): every
 * shape's full extent (far-out tissue folds too); only a direction in which a
 * shape is unbounded (2D shapes are prisms along z) is cut at ±clip.
 */
function logicalBounds(ph: Phantom, axes: Axes, clipU: number, clipV: number): [number, number, number, number, boolean] {
  let u0 = Infinity, u1 = -Infinity, v0 = Infinity, v1 = -Infinity, cut = false;
  for (const sh of ph.shapes) {
    const b = sh.bounds();
    for (let k = 0; k < 8; k++) {
      const c = [k & 1 ? b.max[0] : b.min[0], k & 2 ? b.max[1] : b.min[1], k & 4 ? b.max[2] : b.min[2]];
      let u = 0, v = 0, infU = false, infV = false;
      for (let i = 0; i < 3; i++) {
        const x = c[i]!;
        if (axes.read[i] !== 0) { if (Number.isFinite(x)) u += axes.read[i]! * x; else infU = true; }
        if (axes.phase[i] !== 0) { if (Number.isFinite(x)) v += axes.phase[i]! * x; else infV = true; }
      }
      if (infU) { cut = true; u = Math.sign(axes.read[2]!) * Math.sign(c[2]!) * clipU; }
      if (infV) { cut = true; v = Math.sign(axes.phase[2]!) * Math.sign(c[2]!) * clipV; }
      u0 = Math.min(u0, u); u1 = Math.max(u1, u); v0 = Math.min(v0, v); v1 = Math.max(v1, v);
    }
  }
  return [u0, u1, v0, v1, cut];
}

/**
 * The check of one protocol on one phantom. `seq` is the protocol's sequence
 * (buildSequence), built by the caller so that errors in the protocol are
 * reported once.
 */
export function checkProtocol(ph: Phantom, p: Protocol, seq: Sequence, opts: CheckOptions = {}): CheckResult {
  const th = opts.thresholds ?? DEFAULT_THRESHOLDS;
  const axes = logicalAxes(p);
  const names = axes.names;
  const dx = p.fov.read / p.matrix.read, dy = p.fov.phase / p.matrix.phase;
  const Mr = p.matrix.read, Mp = p.matrix.phase;
  const Lr = seq.grid.read, Lp = seq.kspace.phase;
  const threeD = seq.grid.threeD;
  const Ms = seq.image.slice;
  const notes: string[] = [];
  const items: CheckItem[] = [];
  const fatIn = fatShiftInput(p, seq);

  // ---- planes through the imaged slab ----
  const planes: SlabPlane[] = [];
  if (threeD) {
    const n = Math.min(Ms, 3);
    for (let k = 0; k < n; k++) {
      const step = n === 1 ? Math.floor(Ms / 2) : Math.round((k * (Ms - 1)) / (n - 1));
      // step p sits at position + (p − (P − 1)/2)·thickness (README, Conventions; the image's and image.nii's centres)
      planes.push({ w: p.slice.position + (step - (Ms - 1) / 2) * p.slice.thickness });
    }
  } else {
    const pos = slicePositions(p).positions;
    const n = Math.min(pos.length, 4);
    for (let k = 0; k < n; k++) planes.push({ w: pos[n === 1 ? Math.floor(pos.length / 2) : Math.round((k * (pos.length - 1)) / (n - 1))]! });
  }
  const clipU = p.fov.read * p.oversampling.read, clipV = 1.5 * p.fov.phase * (1 + p.oversampling.phase);
  const [u0, u1, v0, v1, cut] = logicalBounds(ph, axes, clipU, clipV);
  const maxPts = opts.maxPoints ?? 320;
  const hu = Math.max(dx / 4, (u1 - u0) / maxPts), hv = Math.max(dy / 4, (v1 - v0) / maxPts);
  const sampling: Sampling = { hu, hv, u0, u1, v0, v1, planes };

  // ROI test in logical coordinates (u, v) of a plane at w
  const roiShape = opts.roi ?? null;
  const pos = [0, 0, 0];
  const inRoi = (u: number, v: number, w: number): boolean => {
    if (!roiShape) return Math.abs(u) <= p.fov.read / 4 && Math.abs(v) <= p.fov.phase / 4;
    toPhysical(axes, u, v, w, pos);
    return roiShape.contains(pos[0]!, pos[1]!, pos[2]!);
  };
  const roiText = roiShape ? `${opts.roiText ?? "the given shape"}` : `the central half of the FOV (${cm(p.fov.read / 2)} along read × ${cm(p.fov.phase / 2)} along phase)`;
  if (roiShape) {
    // the ROI must overlap the displayed FOV of some imaged plane
    let hit = false;
    for (const pl of planes) {
      for (let a = 0; a < 64 && !hit; a++) for (let b = 0; b < 64 && !hit; b++) {
        if (inRoi(((a + 0.5) / 64 - 0.5) * p.fov.read, ((b + 0.5) / 64 - 0.5) * p.fov.phase, pl.w)) hit = true;
      }
    }
    if (!hit) {
      throw new UserError(`--roi: the ROI lies outside the FOV (${cm(p.fov.read)} along ${names.read} × ${cm(p.fov.phase)} along ${names.phase}, centred on the isocentre, in the imaged slab); give a shape that overlaps it`);
    }
  }

  // ---- one pass over the sampled points ----
  const { box, signal } = shapeBoxes(ph);
  const slab = scanSlab(new SlabScanInput(
    ph.shapes, box, signal, ph.b0 ?? null, Float64Array.from([...axes.read, ...axes.phase, ...axes.slice]), Float64Array.from(planes, (pl) => pl.w),
    u0, u1, v0, v1, hu, hv, dx, dy, Lp, Lr, Mp, Mr, p.receiverFilter, p.shim, inRoi,
  ));
  const { tissuesPresent, uMin, uMax, dfMin, dfMax, dfSum, nSig, phaseAcc, readAcc, phaseRows, readRows, phaseRoi, readRoi, filterDim } = slab;
  let { vMin, vMax } = slab;
  const { vMinAt, vMaxAt } = slab;
  const fOn = p.receiverFilter;
  const xyz = [0, 0, 0];
  if (nSig === 0) {
    throw new UserError(`no part of the phantom with signal lies in the imaged ${threeD ? "slab" : "slice"} at ${mm(p.slice.position)}; move slice.position`);
  }
  // refine the phase extent to the shape edge (bisection between the last point inside and the next outside)
  const refine = (v: number, at: [number, number], dir: number): number => {
    let a = v, b = v + dir * hv;
    for (let k = 0; k < 30; k++) {
      const mid = (a + b) / 2;
      toPhysical(axes, at[0], mid, at[1], xyz);
      if (ownerAt(ph, xyz[0]!, xyz[1]!, xyz[2]!) >= 0) a = mid; else b = mid;
    }
    return a;
  };
  if (vMax < v1) vMax = refine(vMax, vMaxAt, 1);
  if (vMin > v0) vMin = refine(vMin, vMinAt, -1);

  /**
   * First and last pixel the folded band covers: the pixel centres inside [lo, hi]; a sliver narrower than a
   * pixel that holds no centre gives the pixels its sampled points were counted in (never an empty range).
   */
  const landingPixels = (lo: number, hi: number, M: number, rows: Set<number>): [number, number] => {
    const first = Math.ceil(displayedIndex(lo, M) - 1e-9) + 0, last = Math.floor(displayedIndex(hi, M) + 1e-9) + 0;
    if (last >= first || rows.size === 0) return [first, last];
    return [Math.min(...rows), Math.max(...rows)];
  };
  const foldedList = (m: Map<number, Acc>, d: number, M: number, axisName: string): FoldedShape[] => {
    const out: FoldedShape[] = [];
    for (const [key, a] of m) {
      const s = Math.floor(key / 2), from = `${key % 2 ? "+" : "-"}${axisName}`;
      const sh = ph.shapes[Number(s)]!;
      const lands = Number.isFinite(a.lo);
      // the sampled positions are within half a sampling step of the true landing edges
      const lo = lands ? Math.max(a.lo - (d === dy ? hv : hu) / d / 2, -Math.floor(M / 2) - 0.5) : 0;
      const hi = lands ? Math.min(a.hi + (d === dy ? hv : hu) / d / 2, M - Math.floor(M / 2) - 0.5) : 0;
      out.push({
        shape: sh.label || `shape ${Number(s) + 1} (${sh.type})`,
        tissue: ph.tissues[sh.tissue]!.name,
        from,
        beyondEdge: a.beyond,
        landsPx: lands ? landingPixels(lo, hi, M, a.rows) : null,
        landsM: lands ? [lo * d, hi * d] : null,
        landsRows: a.rows.size,
        roiPixels: a.roi,
      });
    }
    return out;
  };

  // ---- fat shift ----
  const fat = predictFatShift({ ...fatIn, ppm: FAT_SINGLE_PPM });
  const fatMean = predictFatShift({ ...fatIn, ppm: multiPeakMeanPpm() });
  // along read: the shift, or in EPI (the read gradient alternates) the ± shift of alternate lines, which the item judges
  const dxRead = p.fov.read / p.matrix.read;
  const readShift = (x: AxisShift) => {
    const d = { px: x.px, mm: x.m * 1e3, direction: x.direction };
    if (x.perLinePx === undefined) return { perLine: false, value: Math.abs(x.px), text: `moves ${f1(Math.abs(x.px))} px = ${mm(Math.abs(x.m))} toward ${x.direction}`, detail: d };
    const a = Math.abs(x.perLinePx);
    return {
      perLine: true, value: a, detail: { ...d, perLinePx: x.perLinePx },
      text: `moves ±${f1(a)} px = ±${mm(a * dxRead)} in alternate lines (the read gradient alternates, EPI): no net shift, two copies ${f1(2 * a)} px apart, and their difference a ghost at half the FOV along phase`,
    };
  };
  const fr = readShift(fat.readout);
  items.push(item("fatShiftRead", "fat shift", fr.perLine ? "fat shift along read (per line, EPI)" : "fat shift along read", fr.value, th,
    `fat (${f1(fat.hz)} Hz at ${p.field} T) at ${f1(p.pixelBandwidth)} Hz/px (Δf/BW per pixel) ${fr.text}`,
    { ...fr.detail, multiPeakMeanPx: fatMean.readout.px }));
  // 3D: slice encoding is phase encoding (no chemical shift along it); the slab profile moves, so compare with the slab
  const sliceRef = threeD ? p.slice.thickness * Ms : p.slice.thickness;
  // spin echoes: the refocused slab moves too (its own gradient), said beside the excited slab's shift (the item's value)
  const refM = fat.slice.refocusedM;
  const refText = refM !== undefined
    ? `; the refocusing pulse moves its own slab ${mm(Math.abs(refM))} toward ${fat.slice.refocusedDirection} (${f1((Math.abs(refM) / sliceRef) * 100)} %, −Δf/(γ̄·G_refocusing)), and fat signal comes from where the two slabs overlap`
    : "";
  items.push(item("fatShiftSlice", "fat shift", "fat shift along the slice normal", fat.slice.m === 0 ? 0 : (Math.abs(fat.slice.m) / sliceRef) * 100, th,
    fat.slice.m === 0
      ? fat.slice.note
      : `fat is excited ${mm(Math.abs(fat.slice.m))} toward ${fat.slice.direction}, ${f1((Math.abs(fat.slice.m) / sliceRef) * 100)} % of the ${mm(sliceRef)} ${threeD ? "slab (its profile moves; slice encoding itself has no shift)" : "slice"} (Δz = −Δf/(γ̄·G_slice))${refText}`,
    { mm: fat.slice.m * 1e3, direction: fat.slice.direction, ...(refM !== undefined ? { refocusedMm: refM * 1e3, refocusedDirection: fat.slice.refocusedDirection } : {}) }));
  if (p.sequence === "epi") {
    items.push(item("fatShiftPhase", "fat shift", "fat shift along phase (EPI)", Math.abs(fat.phase.px), th,
      `fat moves ${f1(Math.abs(fat.phase.px))} px = ${mm(Math.abs(fat.phase.m))} toward ${fat.phase.direction} (${fat.phase.note})`,
      { px: fat.phase.px, mm: fat.phase.m * 1e3, direction: fat.phase.direction }));
  }

  // ---- wrap along phase ----
  const fovAcqP = Lp * dy;
  const phaseFolded = foldedList(phaseAcc, dy, Mp, names.phase);
  const minFov = minFovNoWrap(vMin, vMax, Mp, Lp);
  const minOs = minOversamplingNoWrap(vMin, vMax, Mp, p.fov.phase);
  const phaseWrap: AxisWrap = {
    axis: "phase", direction: names.phase, fov: p.fov.phase, fovAcquired: fovAcqP, extent: [vMin, vMax],
    folded: phaseFolded, rows: phaseRows.size, roiPixels: phaseRoi,
    minFov: Math.ceil(minFov * 1e4) / 1e4, minOversampling: minOs,
    note: "image periodic in the acquired FOV (Δk = 1/FOV_acq); folded signal lands at y − FOV_acq·n; oversampling removal crops it when it lands outside the displayed FOV",
  };
  const describeFold = (fs: FoldedShape[], axisName: string): string => {
    const sides = [...new Set(fs.filter((f) => f.landsPx).map((f) => f.from))];
    return sides.map((side) => {
      const g = fs.filter((f) => f.from === side && f.landsPx);
      const lo = Math.min(...g.map((f) => f.landsPx![0])), hi = Math.max(...g.map((f) => f.landsPx![1]));
      const loM = Math.min(...g.map((f) => f.landsM![0])), hiM = Math.max(...g.map((f) => f.landsM![1]));
      const by = Math.max(...g.map((f) => f.beyondEdge));
      const shapes = g.map((f) => f.shape);
      const roi = g.some((f) => f.roiPixels > 0);
      return `${shapes.length === 1 ? shapes[0] : `${shapes.length} shapes (${shapes.slice(0, 2).join(", ")}${shapes.length > 2 ? ", …" : ""})`} beyond ${side} by up to ${mm(by)} land${shapes.length === 1 ? "s" : ""} on ${axisName} ${lo}…${hi} (${mm(loM)} … ${mm(hiM)})${roi ? ", inside the ROI" : ""}`;
    }).join("; ");
  };
  // the smallest whole percent whose phase-encode table has the lines needed (rounding to the nearest percent
  // could name one with a line pair too few, which still folds)
  let minOsPct = Math.max(0, Math.floor(minOs * 100 + 1e-9));
  while (phaseLinesFor(Mp, minOsPct / 100) < phaseLinesFor(Mp, minOs)) minOsPct++;
  const avoidP = `no fold with fov.phase ≥ ${cmAtLeast(phaseWrap.minFov!)} or phase oversampling ≥ ${minOsPct} %`;
  const pText = phaseRows.size > 0
    ? `${describeFold(phaseFolded, "rows")}; ${avoidP}`
    : phaseFolded.length > 0
      ? `signal beyond the acquired FOV (${cm(fovAcqP)}) folds outside the displayed FOV and is cropped; ${avoidP}`
      : `the phantom in the ${threeD ? "slab" : "slice"} spans ${mm(vMin)} … ${mm(vMax)} along ${names.phase}, within the acquired FOV of ${cm(fovAcqP)}; ${avoidP}`;
  items.push(item("wrapPhase", "wrap", "wrap along phase: rows hit", phaseRows.size, th, pText, { minFovM: phaseWrap.minFov, minOversampling: minOs }));
  items.push(item("wrapPhaseRoi", "wrap", "wrap along phase: inside the ROI", Math.round(phaseRoi * 10) / 10, th,
    phaseRoi > 0 ? `folded signal covers ~${f1(phaseRoi)} px of the ROI (${roiText})` : `no folded signal lands in the ROI (${roiText})`));

  // ---- wrap along read ----
  const readFolded = foldedList(readAcc, dx, Mr, names.read);
  const uAbs = Math.max(Math.abs(uMin), Math.abs(uMax));
  const readWrap: AxisWrap = {
    axis: "read", direction: names.read, fov: p.fov.read, fovAcquired: Lr * dx, extent: [uMin, uMax],
    folded: readFolded, rows: fOn ? filterDim.size : readRows.size, roiPixels: readRoi,
    minFov: fOn ? null : Math.ceil(minFovNoWrap(uMin, uMax, Mr, Lr) * 1e4) / 1e4,
    minOversampling: fOn ? null : Math.max(1, Math.ceil((((2 * uAbs) / dx + 1) / Mr) * 100) / 100),
    note: fOn
      ? "receiver filter on: signal beyond the sampled read FOV is removed, none folds; the filter rolls off from 0.42 of the sampled bandwidth"
      : "receiver filter off: the read axis folds like phase, with period FOV·read oversampling",
  };
  if (fOn) {
    items.push(item("wrapRead", "wrap", "wrap along read: columns hit", filterDim.size, th,
      filterDim.size > 0
        ? `nothing folds (receiver filter), but the filter's roll-off beyond ${f1(0.42 * p.oversampling.read * 100)} % of the FOV half-width dims ${filterDim.size} columns where the phantom has signal; raise oversampling.read to ≥ 1.2`
        : `nothing folds: the receiver filter removes signal beyond the sampled read FOV (${cm(Lr * dx)})`));
  } else {
    items.push(item("wrapRead", "wrap", "wrap along read: columns hit", readRows.size, th,
      readRows.size > 0
        ? `receiver filter off: ${describeFold(readFolded, "columns")}; no fold with oversampling.read ≥ ${readWrap.minOversampling} or fov.read ≥ ${cmAtLeast(readWrap.minFov!)}`
        : `receiver filter off, but the phantom (${mm(uMin)} … ${mm(uMax)} along ${names.read}) stays within what folds outside the image`));
    items.push(item("wrapReadRoi", "wrap", "wrap along read: inside the ROI", Math.round(readRoi * 10) / 10, th,
      readRoi > 0 ? `folded signal covers ~${f1(readRoi)} px of the ROI (${roiText})` : `no folded signal lands in the ROI (${roiText})`));
  }

  // ---- wrap along slice encoding (3D) ----
  let sliceWrap: AxisWrap | null = null;
  if (threeD) sliceWrap = sliceEncodingWrap(ph, p, seq, axes, items, th, sampling);

  // ---- blur ----
  const present = [...tissuesPresent].map((k) => ph.tissues[k]!);
  const tAcq = 1 / p.pixelBandwidth;
  const refocused = sequenceDefinition(p.sequence).refocuses(p);
  let worstRead = { fw: 0, name: "", t2s: 0 };
  for (const t of present) {
    const t2p = t.t2star < t.t2 ? 1 / (1 / t.t2star - 1 / t.t2) : Infinity;
    const fw = refocused && p.sequence !== "epi" ? fwhmSpinEcho(tAcq, t.t2, t2p) : fwhmGradientEcho(p.sequence === "epi" ? (seq.derived["readoutDuration"]!.value as number) : tAcq, t.t2star);
    if (fw > worstRead.fw) worstRead = { fw, name: t.name, t2s: t.t2star };
  }
  items.push(item("blurRead", "blur", "blur along read (T2* over the readout)", worstRead.fw, th,
    `${worstRead.name} (T2* ${f1(worstRead.t2s * 1e3)} ms) over a ${f1(tAcq * 1e3)} ms readout${refocused && p.sequence !== "epi" ? " centred on the spin echo" : ""}: PSF FWHM ${f1(worstRead.fw)} px (${f1(SINC_FWHM)} px without decay; exponentially weighted window, closed form)`,
    { tissue: worstRead.name, fwhmPx: worstRead.fw }));
  if ((p.sequence === "rare" || p.sequence === "epi") && seq.echoTimes) {
    const et = seq.echoTimes, L = et.length, c = seq.centre.phase;
    let worst = { fw: 0, name: "", span: 0 };
    let tMin = Infinity, tMax = -Infinity;
    for (let n = 0; n < L; n++) if (Number.isFinite(et[n]!)) { tMin = Math.min(tMin, et[n]!); tMax = Math.max(tMax, et[n]!); }
    for (const t of present) {
      const t2p = t.t2star < t.t2 ? 1 / (1 / t.t2star - 1 / t.t2) : Infinity;
      const w = new Float64Array(L);
      for (let n = 0; n < L; n++) {
        // lines skipped by partial Fourier: mirror their partner so this line shows the train alone
        let te = et[n]!;
        if (!Number.isFinite(te)) te = et[2 * c - n] ?? NaN;
        if (!Number.isFinite(te)) continue;
        w[n] = p.sequence === "rare" ? Math.exp(-te / t.t2)
          : p.epiEcho === "spin" ? Math.exp(-te / t.t2) * Math.exp(-Math.abs(te - p.te) / t2p)
          : Math.exp(-te / t.t2star);
      }
      const fw = fwhmSampled(w, c);
      if (fw > worst.fw) worst = { fw, name: t.name, span: tMax - tMin };
    }
    const which = p.sequence === "rare" ? "T2" : p.epiEcho === "spin" ? "T2 and T2′ about the spin echo" : "T2*";
    items.push(item("blurPhase", "blur", `blur along phase (echo-train ${which})`, worst.fw, th,
      `${worst.name}: echo times ${f1(tMin * 1e3)} … ${f1(tMax * 1e3)} ms across k-space weight the lines by ${which} decay: PSF FWHM ${f1(worst.fw)} px`,
      { tissue: worst.name, fwhmPx: worst.fw }));
  }
  const pf = p.partialFourier;
  if (pf.phase < 1 || pf.read < 1) {
    const parts: string[] = [];
    let fwWorst = SINC_FWHM;
    if (pf.phase < 1) {
      const w = new Float64Array(Lp);
      for (let n = seq.grid.phaseFirst; n < Lp; n++) w[n] = 1;
      const fw = fwhmSampled(w, seq.centre.phase);
      fwWorst = Math.max(fwWorst, fw);
      parts.push(`phase: ${Lp - seq.grid.phaseFirst} of ${Lp} lines, zero-filled FWHM ${f1(fw)} px`);
    }
    if (pf.read < 1) {
      const w = new Float64Array(Lr);
      for (let n = seq.grid.offset; n < Lr; n++) w[n] = 1;
      const fw = fwhmSampled(w, Math.floor(Lr / 2)) * (Mr / Lr);
      fwWorst = Math.max(fwWorst, fw);
      parts.push(`read: ${Lr - seq.grid.offset} of ${Lr} samples, zero-filled FWHM ${f1(fw)} px`);
    }
    const homodyne = pf.method === "homodyne";
    items.push(item("blurPartialFourier", "blur", "partial-Fourier resolution", homodyne ? SINC_FWHM : fwWorst, th,
      homodyne
        ? `homodyne recovers the full width (${f1(SINC_FWHM)} px) for an object of smooth phase (Noll et al. 1991); zero-filling would give ${f1(fwWorst)} px (${parts.join("; ")})`
        : `${parts.join("; ")} (full sampling: ${f1(SINC_FWHM)} px)`,
      { zeroFilledFwhmPx: fwWorst, method: pf.method }));
  }

  // ---- distortion from B0 ----
  const dfAbs = Math.abs(dfMax) >= Math.abs(dfMin) ? dfMax : dfMin;
  const dRead = predictOffResonanceShift(fatIn, dfAbs);
  const b0Text = ph.b0Description ?? "no B0 model";
  const dr = readShift(dRead.readout);
  items.push(item("distortionRead", "distortion", dr.perLine ? "distortion along read (B0, per line, EPI)" : "distortion along read (B0)", dr.value, th,
    `Δf in the ${threeD ? "slab" : "slice"} ${f1(dfMin)} … ${f1(dfMax)} Hz (${b0Text}${p.shim ? `, shim ${f1(p.shim)} Hz` : ""}): at the largest |Δf| the image ${dr.text} (Δf/BW per pixel)`,
    { dfMinHz: dfMin, dfMaxHz: dfMax, dfMeanHz: dfSum / nSig, ...dr.detail }));
  if (p.sequence === "epi") {
    items.push(item("distortionPhase", "distortion", "distortion along phase (B0, EPI)", Math.abs(dRead.phase.px), th,
      `largest displacement ${f1(Math.abs(dRead.phase.px))} px = ${mm(Math.abs(dRead.phase.m))} toward ${dRead.phase.direction} at Δf ${f1(dfAbs)} Hz (${dRead.phase.note})`,
      { px: dRead.phase.px, mm: dRead.phase.m * 1e3, direction: dRead.phase.direction }));
  }

  // ---- cost ----
  const snr = seq.derived["relativeSnr"]!.value as number;
  const ref = opts.reference ?? null;
  // a reference at another field: SNR ∝ B0^β as well (the sampling factors alone compare protocols at one field)
  const fieldFactor = ref && ref.field !== undefined && ref.field !== p.field ? (p.field / ref.field) ** SNR_FIELD_EXPONENT : 1;
  const snrRel = ref ? (snr / (ref.seq.derived["relativeSnr"]!.value as number)) * fieldFactor : snr;
  items.push(item("snr", "cost", "relative SNR", snrRel, th,
    `∝ voxel·√(N_avg·N_lines·N_slice·T_adc) (Edelstein et al. 1986)` +
      (fieldFactor !== 1 ? ` × (B0/B0_ref)^${SNR_FIELD_EXPONENT} = ${f1(fieldFactor)} (${p.field} T against ${ref!.field} T; sample-noise regime, Hoult and Richards 1976)` : "") +
      `, relative to ${ref ? ref.name : seq.derived["relativeSnr"]!.note!.replace(/^.*relative to /, "")}; same tissue and contrast assumed`));
  const scan = seq.timing.scanTime;
  items.push(item("scanTime", "cost", "scan time", scan, th, `${scan >= 60 ? `${Math.floor(scan / 60)} min ${(scan % 60).toFixed(0)} s` : `${f1(scan)} s`} (${seq.derived["scanTime"]?.note ?? "from the sequence timing"})`));
  const headroom = (kind: "Gradient" | "Slew", limit: number): { margin: number; axis: string; peak: number } => {
    let best = { margin: Infinity, axis: "", peak: 0 };
    for (const ax of ["Read", "Phase", "Slice"]) {
      const d = seq.derived[`peak${kind}${ax}`];
      if (!d || typeof d.value !== "number") continue;
      const margin = (1 - d.value / limit) * 100;
      if (margin < best.margin) best = { margin, axis: ax.toLowerCase(), peak: d.value };
    }
    return best;
  };
  const g = headroom("Gradient", p.hardware.gmax), s = headroom("Slew", p.hardware.slew);
  items.push(item("gradientHeadroom", "cost", "gradient headroom", g.margin, th,
    `peak ${f1(g.peak * 1e3)} mT/m on the ${g.axis} axis of ${f1(p.hardware.gmax * 1e3)} mT/m entered; against the hardware values entered only, not a nerve-stimulation, SAR or acoustic check`));
  items.push(item("slewHeadroom", "cost", "slew headroom", s.margin, th,
    `peak ${f1(s.peak)} T/m/s on the ${s.axis} axis of ${f1(p.hardware.slew)} T/m/s entered; against the hardware values entered only, not a nerve-stimulation, SAR or acoustic check`));

  if (axes.angle !== 0) notes.push("oblique slice: positions are along the tilted logical axes; direction names are those of the un-tilted orientation");
  if (cut) notes.push(`shapes unbounded along z (2D shapes) reach across the FOV; they are considered within ±${cm(clipU)} along read and ±${cm(clipV)} along phase`);
  notes.push(`phantom sampled every ${mm(hu)} × ${mm(hv)} in ${planes.length} plane${planes.length > 1 ? "s" : ""} of the ${threeD ? "slab" : "slice stack"}; landing positions are good to about half a sampling step`);

  return {
    sequence: seq.name,
    axes: { read: names.read, phase: names.phase, slice: names.slice },
    roi: roiText,
    items,
    wrap: { phase: phaseWrap, read: readWrap, slice: sliceWrap },
    warnings: [...new Set([...p.warnings, ...ph.warnings])],
    notes,
    safety: CHECK_SAFETY_NOTE,
  };
}

/**
 * 3D: signal of the phantom excited outside the slab folds along slice
 * encoding. The slab profile is the small-tip-angle approximation: the
 * Fourier transform of the excitation B1 waveform at γ̄·G·(w − w0)
 * (Pauly, Nishimura & Macovski 1989), relative to the slab centre.
 */
function sliceEncodingWrap(ph: Phantom, p: Protocol, seq: Sequence, axes: Axes, items: CheckItem[], th: Record<string, Threshold>, s: Sampling): AxisWrap {
  const Ms = seq.image.slice, Ls = seq.kspace.slice, t = p.slice.thickness;
  const pulse = seq.pulses[0]!;
  const profile = (dw: number): number => {
    let re = 0, im = 0, r0 = 0, i0 = 0;
    for (let k = 0; k < pulse.b1re.length; k++) {
      const tk = (k + 0.5) * pulse.dt - pulse.centre;
      const th2 = 2 * Math.PI * GAMMA_BAR * pulse.gradient * dw * tk;
      const c = Math.cos(th2), sn = Math.sin(th2);
      re += pulse.b1re[k]! * c - pulse.b1im[k]! * sn;
      im += pulse.b1re[k]! * sn + pulse.b1im[k]! * c;
      r0 += pulse.b1re[k]!; i0 += pulse.b1im[k]!;
    }
    return Math.hypot(re, im) / Math.hypot(r0, i0);
  };
  // sample the phantom coarsely in planes beyond the slab, one slab width on each side
  const slab = Ms * t;
  const xyz = [0, 0, 0];
  const nu = 32, nv = 32;
  let worst = 0;
  const folded: FoldedShape[] = [];
  const rows = new Set<number>();
  let wMin = Infinity, wMax = -Infinity;
  const edgeHi = Ls - Math.floor(Ls / 2) - 0.5, edgeLo = -Math.floor(Ls / 2) - 0.5;
  const perSide = new Map<string, { beyond: number; lo: number; hi: number; exc: number; shape: string; tissue: string }>();
  // step a sits at dw = (a − (Ls − 1)/2)·t from the slab centre (README, Conventions), index a − ⌊Ls/2⌋ in the
  // convention of ./wrap.ts: pw = dw/t + (Ls − 1)/2 − ⌊Ls/2⌋ (half a step apart for an even count). The planes lie a
  // quarter step off the step centres and boundaries, so none falls on a boundary.
  const off = (Ls - 1) / 2 - Math.floor(Ls / 2);
  for (let k = -2 * Ms; k <= 2 * Ms; k++) {
    const dw = ((k + 0.5) * t) / 2;
    const w = p.slice.position + dw;
    const e = pulse.gradient !== 0 ? profile(dw) : 1;
    for (let a = 0; a <= nu; a++) for (let b = 0; b <= nv; b++) {
      const u = s.u0 + ((s.u1 - s.u0) * a) / nu, v = s.v0 + ((s.v1 - s.v0) * b) / nv;
      toPhysical(axes, u, v, w, xyz);
      const o = ownerAt(ph, xyz[0]!, xyz[1]!, xyz[2]!);
      if (o < 0) continue;
      if (e > 0.01) { wMin = Math.min(wMin, dw); wMax = Math.max(wMax, dw); }
      const pw = dw / t + off;
      if (insideAcquired(pw, Ls) || e <= 0.01) continue;
      worst = Math.max(worst, e);
      const sh = ph.shapes[o]!;
      const side = pw > 0 ? `+${axes.names.slice}` : `-${axes.names.slice}`;
      const key = `${o}\u0000${side}`; // only for folding points (few)
      const f = foldPx(pw, Ls);
      const idx = Math.round(displayedIndex(f, Ms));
      rows.add(idx);
      const cur = perSide.get(key) ?? { beyond: 0, lo: Infinity, hi: -Infinity, exc: 0, shape: sh.label || `shape ${o + 1} (${sh.type})`, tissue: ph.tissues[sh.tissue]!.name };
      cur.beyond = Math.max(cur.beyond, (pw > 0 ? pw - edgeHi : edgeLo - pw) * t);
      cur.lo = Math.min(cur.lo, idx); cur.hi = Math.max(cur.hi, idx); cur.exc = Math.max(cur.exc, e);
      perSide.set(key, cur);
    }
  }
  for (const [key, c] of perSide) {
    folded.push({ shape: c.shape, tissue: c.tissue, from: key.split("\u0000")[1]!, beyondEdge: c.beyond, landsPx: [c.lo, c.hi], landsM: [(c.lo - (Ms - 1) / 2) * t, (c.hi - (Ms - 1) / 2) * t], landsRows: c.hi - c.lo + 1, roiPixels: 0 });
  }
  const sides = [...new Set(folded.map((f) => f.from))];
  const text = folded.length > 0
    ? sides.map((side) => {
      const g = folded.filter((f) => f.from === side);
      const lo = Math.min(...g.map((f) => f.landsPx![0])), hi = Math.max(...g.map((f) => f.landsPx![1]));
      return `${g.length} shape${g.length > 1 ? "s" : ""} excited beyond the ${mm(slab)} slab toward ${side} (by up to ${mm(Math.max(...g.map((f) => f.beyondEdge)))}) land on slice-encoding steps ${lo}…${hi}`;
    }).join("; ") + `; up to ${f1(c100(worst))} % of the centre's excitation; widen the slab (more or thicker steps) or move it`
    : `the slab profile (small-tip FT of the pulse) excites no phantom signal beyond the ${mm(slab)} slab above 1 %`;
  items.push(item("wrapSlice", "wrap", "wrap along slice encoding (3D)", c100(worst), th, text, { folded }));
  return {
    axis: "slice", direction: axes.names.slice, fov: slab, fovAcquired: Ls * t,
    extent: Number.isFinite(wMin) ? [wMin, wMax] : null, folded, rows: rows.size, roiPixels: 0, minFov: null, minOversampling: null,
    note: "slab profile by the small-tip-angle approximation (Pauly et al. 1989); signal excited beyond the slab folds by the slab thickness",
  };
}

function c100(v: number): number {
  return Math.round(v * 1000) / 10;
}
