/**
 * The acquisition plan: everything that does not change between TRs or
 * between chunks, computed once — RF affine maps per isochromat class,
 * per-axis phase tables per distinct gradient area, the distinct interval
 * durations, the op list the chunk runner plays, and the fixed chunking.
 * Every large array lives in a SharedArrayBuffer so workers read it in place.
 */
import { GAMMA, GAMMA_BAR } from "../constants.js";
import type { IsochromatSet } from "../isochromats/index.js";
import { ENGINE_ARRAYS, mapIsochromatArrays } from "../isochromats/fields.js";
import type { Sequence, Vec3 } from "../sequence/types.js";
import { rfAffineMany } from "./wasm.js";
import { f64Words, TupleIndex } from "./hash.js";
import type { FoldSpec } from "./fold.js";

/**
 * Default isochromats per chunk (approximate; chunks end at column
 * boundaries). Fixed, so results do not depend on the number of workers; the
 * `chunkIsochromats` option changes it (64 … 2^24; for tests and tuning — the
 * chunking is part of a result's definition, and shards of one run must share
 * it; partial.json records it). The command line reads it from the
 * environment variable ISOFOLD_CHUNK_ISOCHROMATS.
 */
export const CHUNK_ISOCHROMATS = 32768;

/** Whether this JavaScript engine has SharedArrayBuffer (browsers only in cross-origin isolated pages). */
export const HAS_SHARED_MEMORY = typeof SharedArrayBuffer === "function";

/** `bytes` of shared memory where available, else an ordinary ArrayBuffer (workers then get copies). */
export function sharedBuffer(bytes: number): ArrayBufferLike {
  return HAS_SHARED_MEMORY ? new SharedArrayBuffer(bytes) : new ArrayBuffer(bytes);
}

/** Whether a buffer is shared memory. */
export function isShared(b: ArrayBufferLike): boolean {
  return HAS_SHARED_MEMORY && b instanceof SharedArrayBuffer;
}

/**
 * One step of the plan, played on every isochromat of a chunk. Offsets into
 * EnginePlan.tab name a phase table (one (cos, sin) pair per grid index of
 * one logical axis, for one gradient area); duration indices name an entry of
 * EnginePlan.durations (and of the per-duration relaxation factors).
 */
export type Op =
  /** RF pulse: the affine maps of its classes start at rfMaps[mapOffset]; cos/sin of the pulse phase. */
  | { kind: "rf"; mapOffset: number; cosPhase: number; sinPhase: number }
  /** Free interval: relaxation and off-resonance over a duration, and the phase of its gradient areas on the read, phase and slice axes. */
  | { kind: "free"; durationIndex: number; readTable: number; phaseTable: number; sliceTable: number }
  | {
      kind: "adc";
      /** Samples of the readout and the k-space row they go to. */
      samples: number; row: number;
      /** weight·exp(−i·receiver phase), real and imaginary parts */
      weightRe: number; weightIm: number;
      /** per-sample step: duration index of one dwell, and the phase tables of the area G·dwell */
      dwellDurationIndex: number; dwellReadTable: number; dwellPhaseTable: number; dwellSliceTable: number;
      /** γ̄·G_read (Hz/m), for the receiver filter */
      readHzPerMetre: number;
      /** sampled bandwidth 1/dwell (Hz) */
      sampledBandwidth: number;
      /** the readout gradient has a phase or slice part: readout groups must also share the phase and slice grid index */
      groupByPhaseAndSlice: boolean;
      /** (the readout's duration as a free interval is in the ops after it) */
    }
  | { kind: "spoil" }
  /** Mz relaxation over a duration with the transverse part zero (after a spoil): Mz ← Mz·E1 + m0·(1 − E1). */
  | { kind: "relax"; durationIndex: number };

export interface EnginePlan {
  ops: Op[];
  /** Interleaved (cos, sin) phase tables, all axes, at the offsets the ops name. */
  tab: Float64Array;
  /** Distinct interval durations (s). */
  durations: Float64Array;
  /** RF class of every isochromat, and 12 numbers per (pulse, class). */
  rfClass: Int32Array;
  classes: number;
  rfMaps: Float64Array;
  /** Chunk c covers isochromats chunkStart[c] … chunkStart[c+1]−1 (whole columns). */
  chunkStart: Int32Array;
  chunks: number;
  rows: number;
  read: number;
  /** Model the receiver anti-alias filter. */
  receiverFilter: boolean;
  /** Largest chunk (isochromats), for scratch sizing. */
  maxChunk: number;
  /** Receive coils. With coils = 1 and no sensitivities the coil is uniform (sensitivity 1). */
  coils: number;
  /**
   * Complex receive sensitivity of each coil at each isochromat, interleaved
   * (re, im), index 2·(coil·count + i); null for one uniform coil.
   */
  sens: Float64Array | null;
  /** Inputs of the RF maps (class parameters, pulses), for filling them on other threads. */
  rf: RfSpec;
  /**
   * Play the ideally spoiled shortcut (spoiled.ts, runChunkSpoiled): every run
   * of ops between ideal spoils holds at most one RF pulse, so Mxy is zero
   * before every pulse and Mz there is m0 times a function of the RF class.
   */
  spoiledFast: boolean;
  /**
   * The magnetization before every RF pulse is a function of the RF class alone (times m0): spoiledFast, or
   * a balanced sequence, where no in-plane gradient moment is left since the pulse before (balancedInPlane). The
   * fast operator's class playback (fast.ts classHistory) then holds every isochromat's state at the pulses.
   */
  classState: boolean;
  /** Use the WebAssembly SIMD kernels where available (see PlanOptions.wasm). */
  wasm: boolean;
  /**
   * The time-segmented fold of the readout (fold.ts), set by the driver
   * before the chunks run: chunks then hand back Y partials of
   * fold.length (partialLength) instead of k-space; null: k-space partials.
   */
  fold: FoldSpec | null;
}

export interface PlanOptions {
  /** Model the receiver anti-alias filter. */
  receiverFilter: boolean;
  /** Receive coils (default 1) and their sensitivities (see EnginePlan.sens; default none = uniform). */
  coils?: number;
  sens?: Float64Array | null;
  /** Isochromats per chunk (default CHUNK_ISOCHROMATS); part of the result's definition. */
  chunkIsochromats?: number;
  /** Play every op per isochromat even where an exact shortcut applies (the oracle; default false). */
  general?: boolean;
  /** Use the WebAssembly SIMD kernels where available (default true; false = the TypeScript kernels, the oracle). */
  wasm?: boolean;
  /**
   * Fill only the slice-axis phase tables (the fast operator's class playback reads no other; its read and phase
   * sums are FFTs): the read and phase tables are then NaN, so a kernel that read them would give NaN, not a
   * plausible k-space. Default false (every table filled).
   */
  sliceTablesOnly?: boolean;
}

/** What the RF maps are computed from: per-class parameters and the pulses. */
export interface RfSpec {
  classW: Float64Array; classDf: Float64Array; classR1: Float64Array; classR2: Float64Array;
  pulses: { b1re: Float64Array; b1im: Float64Array; dt: number; gradient: number }[];
}

/** A shared copy of `a` (or `a` itself if it is shared already). */
export function shareF64(a: Float64Array): Float64Array {
  if (isShared(a.buffer)) return a;
  const s = sharedF64(a.length);
  s.set(a);
  return s.subarray(0, a.length);
}

export function sharedF64(n: number): Float64Array {
  return new Float64Array(sharedBuffer(Math.max(1, n) * 8));
}
export function sharedI32(n: number): Int32Array {
  return new Int32Array(sharedBuffer(Math.max(1, n) * 4));
}

/**
 * Shares only the arrays the engine reads (iu, iv, iw, m0, r1, r2, df); the
 * others stay as they are.
 */
export function shareEngineArrays(iso: IsochromatSet): IsochromatSet {
  return mapIsochromatArrays(iso, ENGINE_ARRAYS, (a) => (a instanceof Int32Array ? shareI32(a) : shareF64(a as Float64Array)) as typeof a);
}

/** A shared copy of `a` (or `a` itself if it is shared already). */
export function shareI32(a: Int32Array): Int32Array {
  if (isShared(a.buffer)) return a;
  const s = sharedI32(a.length);
  s.set(a);
  return s.subarray(0, a.length);
}

/**
 * Builds the plan without filling the RF maps (rfMaps is allocated, zero):
 * call {@link fillRfMaps} over all classes, on one thread or split among workers.
 */
export function planLayout(
  seq: Sequence,
  iso: IsochromatSet,
  opts: PlanOptions,
): EnginePlan {
  const coils = opts.coils ?? 1;
  const sens = opts.sens ?? null;
  if (sens && sens.length !== 2 * coils * iso.count) throw new Error(`sensitivities: expected ${2 * coils * iso.count} numbers, got ${sens.length}`);
  if (!sens && coils !== 1) throw new Error("more than one coil needs sensitivities");
  return planFromClasses(seq, iso, rfClasses(iso), chunkStarts(iso, opts.chunkIsochromats), opts);
}

/** RF classes of a plan: each isochromat's class (may be empty where no isochromat is stored) and each class's w, Δf, r1, r2. */
export interface RfClassSpec {
  rfClass: Int32Array; classes: number; classW: Float64Array; classDf: Float64Array; classR1: Float64Array; classR2: Float64Array;
}

/**
 * The plan from given RF classes and chunk boundaries (planLayout finds them
 * from stored isochromats; the fast operator's streamed path enumerates the
 * classes from the phantom's tissues). RF maps allocated, not filled.
 */
export function planFromClasses(
  seq: Sequence,
  grid: { uGrid: Float64Array; vGrid: Float64Array; wGrid: Float64Array },
  cls: RfClassSpec,
  starts: number[],
  opts: PlanOptions,
): EnginePlan {
  const coils = opts.coils ?? 1;
  const sens = opts.sens ?? null;
  const grids = [grid.uGrid, grid.vGrid, grid.wGrid];
  // --- phase tables, deduplicated per (axis, area)
  const tabKeys = new Map<string, number>();
  const tabList: { axis: number; area: number; offset: number }[] = [];
  let tabLen = 0;
  const table = (axis: number, area: number): number => {
    const key = `${axis}:${area}`;
    let off = tabKeys.get(key);
    if (off === undefined) {
      off = tabLen;
      tabLen += 2 * grids[axis]!.length;
      tabKeys.set(key, off);
      tabList.push({ axis, area, offset: off });
    }
    return off;
  };
  const durKeys = new Map<number, number>();
  const dur = (t: number): number => {
    let k = durKeys.get(t);
    if (k === undefined) {
      k = durKeys.size;
      durKeys.set(t, k);
    }
    return k;
  };
  const free = (duration: number, area: Vec3) => ({
    kind: "free" as const, durationIndex: dur(duration), readTable: table(0, area[0]), phaseTable: table(1, area[1]), sliceTable: table(2, area[2]),
  });

  // --- RF classes: isochromats with the same (w, Δf, r1, r2), bitwise, see the same pulse
  const rfClass = cls.rfClass, classes = cls.classes;
  const rfMaps = sharedF64(seq.pulses.length * classes * 12);
  const rf: RfSpec = {
    classW: cls.classW, classDf: cls.classDf, classR1: cls.classR1, classR2: cls.classR2,
    pulses: seq.pulses.map((p) => ({ b1re: p.b1re, b1im: p.b1im, dt: p.dt, gradient: p.gradient })),
  };

  // --- ops, with consecutive free intervals merged (exact: areas and durations add)
  // Exact rewrites: consecutive free intervals merge (areas and durations
  // add); the readout's own duration joins the free intervals after it; and
  // an ideal spoil makes every free interval between the last readout or RF
  // before it and the next readout or RF after it act on Mz only — the
  // transverse part is discarded by the spoil or zero after it — so they
  // become one spoil followed by one Mz relaxation over their total duration.
  const ops: Op[] = [];
  let pend: { duration: number; area: Vec3 } | null = null;
  let spoiled = false;
  const flush = () => {
    if (spoiled) {
      ops.push({ kind: "spoil" });
      if (pend && pend.duration > 0) ops.push({ kind: "relax", durationIndex: dur(pend.duration) });
    } else if (pend && pend.duration > 0) {
      ops.push(free(pend.duration, pend.area));
    }
    pend = null;
    spoiled = false;
  };
  const addFree = (duration: number, area: Vec3) => {
    if (!pend) pend = { duration: 0, area: [0, 0, 0] };
    pend.duration += duration;
    pend.area = [pend.area[0] + area[0], pend.area[1] + area[1], pend.area[2] + area[2]];
  };
  for (const b of seq.blocks) {
    if (b.kind === "free") {
      addFree(b.duration, b.area);
      continue;
    }
    if (b.kind === "spoil") {
      spoiled = true;
      continue;
    }
    flush();
    if (b.kind === "rf") {
      ops.push({ kind: "rf", mapOffset: b.pulse * classes * 12, cosPhase: Math.cos(b.phase), sinPhase: Math.sin(b.phase) });
    } else {
      ops.push({
        kind: "adc", samples: b.samples, row: b.row,
        weightRe: b.weight * Math.cos(b.phase), weightIm: -b.weight * Math.sin(b.phase),
        dwellDurationIndex: dur(b.dwell),
        dwellReadTable: table(0, b.grad[0] * b.dwell), dwellPhaseTable: table(1, b.grad[1] * b.dwell), dwellSliceTable: table(2, b.grad[2] * b.dwell),
        readHzPerMetre: GAMMA_BAR * b.grad[0], sampledBandwidth: 1 / b.dwell, groupByPhaseAndSlice: b.grad[2] !== 0 || b.grad[1] !== 0,
      });
      const T = b.samples * b.dwell;
      addFree(T, [b.grad[0] * T, b.grad[1] * T, b.grad[2] * T]);
    }
  }
  flush();

  // --- fill the tables: exp(−i2πγ̄·A·coordinate)
  const tab = sharedF64(tabLen);
  for (const { axis, area, offset } of tabList) {
    const g = grids[axis]!;
    if (opts.sliceTablesOnly && axis !== 2) {
      tab.fill(NaN, offset, offset + 2 * g.length);
      continue;
    }
    const k = -2 * Math.PI * GAMMA_BAR * area;
    for (let i = 0; i < g.length; i++) {
      const th = k * g[i]!;
      tab[offset + 2 * i] = Math.cos(th);
      tab[offset + 2 * i + 1] = Math.sin(th);
    }
  }
  const durations = sharedF64(durKeys.size);
  for (const [t, k] of durKeys) durations[k] = t;

  // --- chunks of whole columns
  let maxChunk = 0;
  for (let c = 0; c + 1 < starts.length; c++) maxChunk = Math.max(maxChunk, starts[c + 1]! - starts[c]!);
  const chunkStart = sharedI32(starts.length).subarray(0, starts.length);
  chunkStart.set(starts);
  return {
    ops, tab, durations, rfClass, classes, rfMaps, chunkStart, chunks: starts.length - 1,
    rows: seq.kspace.slice * seq.kspace.phase, read: seq.kspace.read,
    receiverFilter: opts.receiverFilter, maxChunk, coils, sens: sens ? shareF64(sens) : null, rf,
    spoiledFast: !(opts.general ?? false) && spoiledUnits(ops),
    classState: !(opts.general ?? false) && (spoiledUnits(ops) || balancedInPlane(seq)),
    wasm: opts.wasm ?? true,
    fold: null,
  };
}

/**
 * Whether every RF pulse meets a transverse magnetization free of in-plane gradient phase: zero (before the
 * first pulse, or after an ideal spoil), or with the read and phase gradient moments since the pulse before summing
 * to zero (a balanced sequence, e.g. bSSFP). Then, the pulses and the through-slice gradients acting per RF class,
 * every isochromat's state at a pulse is m0 times a function of its class; the in-plane phase of a readout is that
 * of the moment since its last pulse. Moments below 1e-9 cycles/m count as zero (rounding of the areas' sum).
 */
export function balancedInPlane(seq: Sequence): boolean {
  let a0 = 0, a1 = 0, transverse = false;
  for (const b of seq.blocks) {
    if (b.kind === "rf") {
      if (transverse && (Math.abs(GAMMA_BAR * a0) > 1e-9 || Math.abs(GAMMA_BAR * a1) > 1e-9)) return false;
      a0 = a1 = 0;
      transverse = true;
    } else if (b.kind === "spoil") {
      a0 = a1 = 0;
      transverse = false;
    } else if (b.kind === "free") {
      a0 += b.area[0];
      a1 += b.area[1];
    } else if (b.kind === "adc") {
      a0 += b.grad[0] * b.samples * b.dwell;
      a1 += b.grad[1] * b.samples * b.dwell;
    }
  }
  return true;
}

/**
 * Whether every run of ops between ideal spoils (and before the first) holds
 * at most one RF pulse. Then the transverse magnetization is zero before every
 * pulse (it starts at zero and each spoil zeroes it), so before each pulse an
 * isochromat's state is (0, 0, m0·mz_c) with mz_c a function of its RF class
 * alone — the condition of the spoiled shortcut. Spin echoes, RF-spoiled and
 * balanced sequences (two or more pulses without an ideal spoil between) fail it.
 */
export function spoiledUnits(ops: Op[]): boolean {
  let pulses = 0;
  for (const op of ops) {
    if (op.kind === "spoil") pulses = 0;
    else if (op.kind === "rf" && ++pulses > 1) return false;
  }
  return true;
}

/** Builds the plan and fills every RF map on this thread. */
export function makePlan(
  seq: Sequence,
  iso: IsochromatSet,
  opts: PlanOptions,
): EnginePlan {
  const plan = planLayout(seq, iso, opts);
  fillRfMaps(plan, 0, plan.classes);
  return plan;
}

/**
 * Fills the RF affine maps of classes c0 … c1−1 for every pulse (see
 * {@link rfAffine}): the effective offset during pulse p is
 * f = γ̄·G_slice·w + Δf (Hz). Pure per class, so class ranges can be filled
 * on different threads into the shared rfMaps.
 */
export function fillRfMaps(plan: EnginePlan, c0: number, c1: number): void {
  fillRfMapsOf(plan.rf, plan.rfMaps, plan.classes, plan.wasm, c0, c1);
}

/** fillRfMaps from the parts it reads (a helper thread gets these, not the plan): classes c0 … c1−1 of every pulse into `maps`. */
export function fillRfMapsOf(rf: RfSpec, maps: Float64Array, classes: number, wasm: boolean, c0: number, c1: number): void {
  const { classW, classDf, classR1, classR2, pulses } = rf;
  if (c1 <= c0) return;
  const f = new Float64Array(c1 - c0);
  for (let pi = 0; pi < pulses.length; pi++) {
    const p = pulses[pi]!;
    for (let c = c0; c < c1; c++) f[c - c0] = GAMMA_BAR * p.gradient * classW[c]! + classDf[c]!;
    rfAffineMany(maps, (pi * classes + c0) * 12, c1 - c0, f, classR1.subarray(c0, c1), classR2.subarray(c0, c1), p.b1re, p.b1im, p.dt, GAMMA, wasm);
  }
}

/**
 * RF classes by numeric hashing of the bits of (iw, Δf, r1, r2); ids in
 * first-seen order. Returns the class of each isochromat (shared memory) and
 * each class's slice coordinate w (m), Δf (Hz), r1, r2 (1/s).
 */
export function rfClasses(iso: IsochromatSet): {
  rfClass: Int32Array; classes: number; classW: Float64Array; classDf: Float64Array; classR1: Float64Array; classR2: Float64Array;
} {
  const index = new TupleIndex(7, 1024);
  const key = new Uint32Array(7);
  const rfClass = sharedI32(iso.count).subarray(0, iso.count);
  const { iw, df, r1, r2 } = iso;
  for (let i = 0; i < iso.count; i++) {
    key[0] = iw[i]!;
    f64Words(df[i]!, key, 1);
    f64Words(r1[i]!, key, 3);
    f64Words(r2[i]!, key, 5);
    rfClass[i] = index.id(key, 0);
  }
  const classes = index.size;
  const out = { classW: sharedF64(classes), classDf: sharedF64(classes), classR1: sharedF64(classes), classR2: sharedF64(classes) };
  decodeClassKeys(index.keys, classes, iso.wGrid, out);
  return { rfClass, classes, ...out };
}

/**
 * Fills the per-class parameters from the hashed class keys (7 words per
 * class: through-slice index iw, then the bits of Δf, R1 and R2 as two words
 * each) for classes 0 … C−1: slice coordinate wGrid[iw], Δf, R1, R2.
 */
export function decodeClassKeys(
  keys: Uint32Array, C: number, wGrid: Float64Array,
  out: { classW: Float64Array; classDf: Float64Array; classR1: Float64Array; classR2: Float64Array },
): void {
  const w2 = new Uint32Array(2), f2 = new Float64Array(w2.buffer);
  const word = (c: number, o: number) => {
    w2[0] = keys[c * 7 + o]!;
    w2[1] = keys[c * 7 + o + 1]!;
    return f2[0]!;
  };
  for (let c = 0; c < C; c++) {
    out.classW[c] = wGrid[keys[c * 7]!]!;
    out.classDf[c] = word(c, 1);
    out.classR1[c] = word(c, 3);
    out.classR2[c] = word(c, 5);
  }
}

/**
 * Chunk boundaries: runs of whole columns, each closed once it holds at least
 * CHUNK_ISOCHROMATS isochromats (the last takes the rest). A function of the
 * isochromat set alone, so it is the same for any number of workers or shards.
 */
export function chunkStarts(iso: { colStart: Int32Array; columns: number }, size = CHUNK_ISOCHROMATS): number[] {
  const starts: number[] = [0];
  for (let c = 1; c <= iso.columns; c++) {
    const s = iso.colStart[c]!;
    if (s - starts[starts.length - 1]! >= size || c === iso.columns) {
      if (s > starts[starts.length - 1]!) starts.push(s);
    }
  }
  return starts;
}

/** Number of chunks of an isochromat set. */
export function countChunks(iso: { colStart: Int32Array; columns: number }, size = CHUNK_ISOCHROMATS): number {
  return chunkStarts(iso, size).length - 1;
}
