/**
 * The fast readout operator: k-space of an ideally spoiled 2D Cartesian
 * sequence at a cost that grows with the image grid, not with isochromats ×
 * readout samples. The direct operator (chunk.ts) stays the oracle.
 *
 * For static spins and linear gradients a readout sample of coil q is
 *
 *   s_q(n, j) = c_n · Σ_i S_q(r_i)·h_i·m0_i·P_{c(i)}(n) · exp(−i2π(kx_j·u_i + ky_n·v_i)) · exp(−j·Δt·λ_i),
 *
 * with n the readout (line), j the sample, c(i) the RF class, P_c(n) the
 * transverse state per unit m0 of class c at the start of readout n without
 * the in-plane factors (the spoiled shortcut's P_c: exact, one number per
 * class), h_i the receiver filter and λ = R2 + i2πΔf.
 *
 * Three exact-to-tolerance factorizations make it fast:
 * - Line factor: P_c(n) ≈ Σ_r A_r(n)·G_r(c), a low-rank split of the (lines ×
 *   classes) matrix by pivoted Gram–Schmidt (rank-revealing QR, Businger &
 *   Golub 1965) weighted by each class's magnetization; in steady state the
 *   rank is 1, the approach to it adds a few.
 * - Time factor: exp(−j·Δt·λ) ≈ Σ_l B_l(j)·C_l(λ) over the (R2, Δf) values
 *   present: time segmentation (Noll, Meyer, Pauly, Nishimura & Macovski 1991,
 *   IEEE TMI 10:629) with least-squares interpolators (Sutton, Noll & Fessler
 *   2003, IEEE TMI 22:178): the B_l are an orthonormal basis of the weighted
 *   decay curves chosen by the same pivoted Gram–Schmidt, C_l the
 *   least-squares coefficients. L follows from the tolerance.
 * - Spatial factor: isochromats lie on the sub-voxel grid u = u0 + a·du,
 *   v = v0 + b·dv, and Cartesian k steps by Δkx·du = ±1/Mu, Δky·dv = 1/Mv
 *   (whole numbers Mu, Mv), so Σ_{a,b} exp(−i2π(kx·u + ky·v))·X(a, b) is an
 *   exact DFT of the grid folded modulo (Mv, Mu): an FFT, no interpolation.
 *   Isochromats sharing a grid position and (R2, Δf) fold into one weight per
 *   (line rank, segment) first; coil sensitivities multiply the weights.
 *
 * The cost is one pass over the isochromats per line rank, R·L·coils FFTs of
 * the folded grid and R·L products per sample. Cases the operator does not
 * cover (not ideally spoiled, oblique readout gradients, non-Cartesian or
 * varying readouts, many RF classes) are refused with a reason; the caller
 * then runs the direct operator and says so.
 */
import { GAMMA_BAR } from "../constants.js";
import type { IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { fillRfMaps, HAS_SHARED_MEMORY, isShared, type EnginePlan, type Op } from "./plan.js";
import type { RfJob } from "./rf-job.js";
import { receiverFilter } from "./chunk.js";
import { rfOnState } from "./kernels.js";
import { BasisSweep, projectOnKernel } from "./basis-wasm.js";
import { kernelSwitch } from "./wasm-asm.js";
import type { CellStream } from "./fast-stream.js";
import { openPosition, ParallelPhase, PhaseTransform, PHASE_SLOTS, readAxis, readStep, reservePhaseMemory, zeroBlock, type PhaseShared, type SlotTrack } from "./fast-phase.js";

/** Which readout operator to use ("auto": the cheaper by a cost predicted from the plan, see predictReadoutCosts). */
export type ReadoutChoice = "auto" | "fast" | "direct";
/** An operator that runs. */
export type ReadoutOperator = "fast" | "direct";

/** Default tolerance of the fast operator: relative L2 error of k-space. */
export const DEFAULT_TOLERANCE = 1e-6;

/** What the readout operator did, for report.json. */
export interface ReadoutReport {
  /** Operator used. */
  operator: ReadoutOperator;
  /** Operator asked for. */
  requested: ReadoutChoice;
  /** Target relative L2 error of k-space (fast operator). */
  tolerance: number;
  /** Why the direct operator ran although the fast one was asked for. */
  fallback?: string;
  /** With "auto": the operator chosen from the predicted costs, and those costs (see {@link ReadoutCosts}). */
  choice?: ReadoutOperator;
  predicted?: ReadoutCosts;
  /** With "auto", where the time-segmented fold (fold.ts) was predicted dearer than the direct readout: its prediction. */
  foldPredicted?: ReadoutCosts;
  /** The time-segmented fold (fold.ts): the (Δf, R2) box its interpolators cover, positions, bytes of one chunk partial, readouts in its estimate. */
  fold?: { dfHz: [number, number]; r2PerS: [number, number]; positions: number; partialBytes: number; estimateLines: number };
  method?: string;
  /** How a sharded run splits the fast result. */
  sharding?: string;
  /** Each factor (line rank, time segments, skipped grids) was truncated at tolerance/split. */
  split?: number;
  /** Time segments L. */
  segments?: number;
  /** Rank of the line factor R (the largest of the groups' with lineGroups). */
  lineRank?: number;
  /** 3D: the operator ran once per slice-encoding step, on that step's lines (the line factor is of low rank within one). */
  lineGroups?: number;
  /** (rank, segment, coil) grids transformed and skipped as below the tolerance (with the sum of the skipped ones' bounds). */
  pairs?: { transformed: number; skipped: number; skippedBound: number };
  /** DFT lengths of the folded grid [phase, read]. */
  grid?: [number, number];
  /** Where the weights came from (streamed cells), if not stored isochromats. */
  weights?: string;
  /** Non-uniform FFT kernel width (none: every position is on the DFT grid). */
  kernelWidth?: number | null;
  /**
   * Streamed cells with coil sensitivities: each (column, coil) of one tissue through the slice folded from the
   * table's through-slice moments (slice-basis.ts throughSliceBasis), the terms of least weight left out within
   * tolerance/split of the column's: (column, coil) pairs so folded, mean terms kept of `of`, and the largest
   * bound on a pair's relative error left out.
   */
  sensitivityTerms?: { pairs: number; meanKept: number; of: number; maxBound: number };
  /**
   * A-posteriori estimate: the direct sum on a seeded, stratified subset of samples against the fast result
   * (ESTIMATE_SUBSET_MARGIN × the subset's relative L2 error; the fold: ESTIMATE_MARGIN × its lines'), at least
   * `floor` = ESTIMATE_FLOOR × tolerance; `measured` is the value before the floor.
   */
  estimate?: { samples: number; seed: number; relL2: number; floor?: number; measured?: number };
  /**
   * A B0 model giving more RF classes than exactClassesOver, interpolated in Δf (fast-stream.ts DfNodes): `order`-point
   * Lagrange interpolation between nodes `stepHz` apart (from the tolerance and the coherence span `span`, s), `nodes`
   * classes in all; `probes` classes at exact Δf measured the largest relative error `maxRelError`, included in the
   * estimate as ESTIMATE_MARGIN × it. The last fold pass folded `tableColumns` columns from shift tables (fast-stream.ts
   * shiftTables) and `nodeColumns` per node (the receiver filter not flat over them).
   */
  b0Interpolation?: { order: number; stepHz: number; nodes: number; exactClassesOver: number; span: number; probes: number; maxRelError: number; tableColumns: number; nodeColumns: number };
}

const TWO_PI = 2 * Math.PI;
/** Largest (classes × readouts) the line factor handles (memory: 16 B each). */
export const MAX_CLASS_LINES = 1 << 23;
/** Largest line rank and number of time segments before the operator gives up (the direct one is then cheaper). */
const MAX_RANK = 24;
const MAX_SEGMENTS = 48;
/** Bytes of folded grids held at once (ranks per pass over the isochromats follow from it). */
const GRID_BYTES = 512 * 2 ** 20;
/** Folded grids per block of read columns: about this many bytes (a few read columns stay in cache while transformed). */
const BLOCK_BYTES = 2 * 2 ** 20;
/** Phase-step work (R·L·coils·Mv·read columns) from which a helper thread shares it (below, its hand-offs cost more than they save). */
const PARALLEL_PHASE_WORK = 1 << 20;

/** A helper thread for the phase step (engine/fast-node.ts registers one in Node): start() posts a run's shared buffers. */
export interface PhaseHelper {
  start(shared: PhaseShared): void;
  /** Posts part of a run's RF maps to fill (fillRfMapsShared; rf-job.ts runRfJob on the helper's side). */
  rf?(job: RfJob): void;
  /** Asks the helper to write the pages of a memory reserve ahead of a run (fast-phase.ts touchReserve). */
  touch?(buf: SharedArrayBuffer, ctrl: SharedArrayBuffer): void;
}
let phaseHelper: (() => PhaseHelper | null) | null = null;
let phaseMinWork = PARALLEL_PHASE_WORK;
let helperBlocks = 0;

/** Blocks of the last fast run's phase step that the helper thread transformed (for tests). */
export function lastHelperBlocks(): number {
  return helperBlocks;
}

/**
 * Registers where helper threads come from (null: everything on the calling
 * thread) and from what phase-step work on they are used (tests: 0). The bits
 * are the same either way.
 */
export function setPhaseHelper(f: (() => PhaseHelper | null) | null, minWork = PARALLEL_PHASE_WORK, rfMinWork = PARALLEL_RF_WORK): void {
  phaseHelper = f;
  phaseMinWork = minWork;
  rfMinWork_ = rfMinWork;
}

/** RF-map work (classes × pulse samples) from which the helper thread fills half of the maps (below, the hand-off costs more). */
const PARALLEL_RF_WORK = 1 << 15;
let rfMinWork_ = PARALLEL_RF_WORK;

/**
 * fillRfMaps of every class, the upper half on the helper thread where there is one and the work is large
 * enough (each class's map is computed alone, so the bits are the same on either thread). The main thread
 * fills the lower half, then takes the upper half back if the helper has not started it, or waits for it;
 * a helper that failed, or has not finished long after the main thread's own half, is done without.
 */
export function fillRfMapsShared(plan: EnginePlan, allowHelper: boolean): void {
  rfSplit = "none";
  const C = plan.classes;
  let samples = 0;
  for (const p of plan.rf.pulses) samples += p.b1re.length;
  const h = allowHelper && phaseHelper !== null && C >= 2 && C * samples >= rfMinWork_ && HAS_SHARED_MEMORY && isShared(plan.rfMaps.buffer) ? phaseHelper() : null;
  if (!h?.rf) {
    fillRfMaps(plan, 0, C);
    return;
  }
  const cm = C >> 1, ctrl = new Int32Array(new SharedArrayBuffer(4));
  h.rf({ rf: plan.rf, maps: plan.rfMaps, classes: C, wasm: plan.wasm, c0: cm, c1: C, ctrl });
  const t0 = performance.now();
  fillRfMaps(plan, 0, cm);
  const own = performance.now() - t0;
  if (Atomics.compareExchange(ctrl, 0, 0, 3) === 0) {
    fillRfMaps(plan, cm, C);
    rfSplit = "main";
    return;
  }
  // the helper is filling: wait for it (far longer than its half should take: it failed or is starved, so fill here)
  const limit = performance.now() + Math.max(1000, 20 * own);
  while (Atomics.load(ctrl, 0) === 1 && performance.now() < limit) Atomics.wait(ctrl, 0, 1, 50);
  if (Atomics.load(ctrl, 0) !== 2) {
    fillRfMaps(plan, cm, C);
    rfSplit = "main";
  } else rfSplit = "helper";
}

let rfSplit: "none" | "main" | "helper" = "none";

const pairSkipping = kernelSwitch();

/** Switches the skipping of (rank, segment) pairs off (tests: every pair transformed, the slow sum the skipping is checked against); returns the previous setting. */
export function setPairSkipping(on: boolean): boolean {
  return pairSkipping.set(on);
}

/** Who filled the upper half of the last run's RF maps (fillRfMapsShared; for tests): not split, the main thread after all, or the helper. */
export function lastRfSplit(): "none" | "main" | "helper" {
  return rfSplit;
}

/**
 * Scratch arrays of a run kept for the next run on this thread (the
 * operator runs synchronously; nothing of them outlives a run): repeated runs
 * in one process (the previewer, the demo) then neither fault in new pages
 * nor leave large garbage. At most SCRATCH_MAX values (32 MB) are kept per
 * thread in all: a long-lived process (a page's workers) holds no more than
 * that after a large run.
 */
const scratchPool = new Map<string, Float64Array>();
const SCRATCH_MAX = 1 << 22;
let scratchKept = 0;

/** A zeroed array of n values: a view of the kept one for `slot` when it is large enough. */
function scratchF64(slot: string, n: number): Float64Array {
  const kept = scratchPool.get(slot);
  if (kept && kept.length >= n) {
    const v = kept.subarray(0, n);
    v.fill(0);
    return v;
  }
  const a = new Float64Array(n);
  const freed = kept ? kept.length : 0;
  if (scratchKept - freed + n <= SCRATCH_MAX) {
    scratchPool.set(slot, a);
    scratchKept += n - freed;
  }
  return a;
}

/** Columns × length from which pivotedBasis sweeps on the SIMD kernel (below, copying the columns in costs more than it saves). */
const SWEEP_MIN = 4096;

/** Samples of the a-posteriori estimate and its seed. */
export const ESTIMATE_SAMPLES = 16;
/** Rows the estimate's samples are drawn from (the cost per isochromat is one product per row). */
export const ESTIMATE_ROWS = 4;
/** The estimate is this margin times the relative L2 error on the lines it checks (the fold's whole lines), and the B0 probes' error. */
export const ESTIMATE_MARGIN = 3;
/**
 * The spoiled operator's estimate is this margin times the relative L2 error on its random subset of samples. The
 * subset's ratio has a sampling spread: over 160 random small phantoms and protocols (disc, T1 200–2000 ms, T2 20–150 ms,
 * T2* 5–150 ms, fat, B0 gradient, 8–16², flip, TE, density, spread, receiver filter) the true error reached 4.0×
 * the subset's, so 3 (the margin before) missed 2 of them; 5 covers every one with room.
 */
export const ESTIMATE_SUBSET_MARGIN = 5;
export const ESTIMATE_SEED = 20031;
/**
 * The smallest estimate reported, as a fraction of the tolerance: the estimate resolves errors down to a tenth of
 * the tolerance and reports that floor below it. A subset cannot see an error that sits on lines or samples
 * outside it (e.g. one line of a spin echo whose line factor is truncated more than the others'), and the
 * estimate's reference (the exact per-class states) and the direct operator's per-isochromat evolution may differ
 * by amounts far below the tolerance. Over 54 random small cases of every preset and phantom (fast against
 * direct, 1e-4 and 1e-6; before the floor and the stratified subset) the estimate fell below the true error in 7,
 * by at most 9×; those errors were at most 5.8 % of the tolerance.
 */
export const ESTIMATE_FLOOR = 0.1;

/** An estimate with the floor applied: relL2 at least ESTIMATE_FLOOR × tolerance; the floor and the value measured on the subset (`measured`) stated beside it. */
export function flooredEstimate<E extends { relL2: number }>(e: E, tolerance: number): E & { floor: number; measured: number } {
  const floor = ESTIMATE_FLOOR * tolerance;
  return { ...e, relL2: Math.max(e.relL2, floor), floor, measured: e.relL2 };
}

/**
 * `count` distinct picks from `items`, stratified by `key` (e.g. distance from the k-space centre): the first
 * pick is the item of least key (the centre, which carries most of the signal: an error there weighs most); the
 * other items, sorted by key, are cut into `count` − 1 strata of (nearly) equal size and one item is drawn from
 * each by the seeded generator, so a subset always holds the centre, its neighbourhood and items far from it.
 * Ties in key keep item order.
 */
export function stratifiedPicks<T>(items: readonly T[], count: number, key: (t: T) => number, rnd: () => number): T[] {
  const sorted = items.map((t, i) => ({ t, i, k: key(t) })).sort((a, b) => a.k - b.k || a.i - b.i);
  const n = Math.min(count, sorted.length);
  if (n === 0) return [];
  const out: T[] = [sorted[0]!.t], rest = sorted.length - 1;
  for (let c = 0; c < n - 1; c++) {
    const lo = 1 + Math.floor((c * rest) / (n - 1)), hi = 1 + Math.floor(((c + 1) * rest) / (n - 1));
    out.push(sorted[lo + Math.floor(rnd() * (hi - lo))]!.t);
  }
  return out;
}

// ---------------------------------------------------------------------------
// Pivoted Gram–Schmidt: an orthonormal basis of weighted complex vectors.

/**
 * Columns y_c (length m, interleaved, c = 0 … count−1, in `y`, overwritten
 * with residuals). Adds the column of largest residual norm to the basis,
 * orthogonalizes (twice, for stability) and stops once the residual's
 * Frobenius norm is at most tol × the initial one. Returns the basis
 * (interleaved, m per vector) or null when more than maxRank are needed.
 */
export function pivotedBasis(y: Float64Array, m: number, count: number, tol: number, maxRank: number, wasm = true): Float64Array[] | null {
  const norm2 = new Float64Array(count);
  let total = 0;
  for (let c = 0; c < count; c++) {
    const s = sumSquaresAt(y, c * 2 * m, 2 * m);
    norm2[c] = s;
    total += s;
  }
  const basis: Float64Array[] = [];
  if (total === 0) return basis;
  // the sweeps on the SIMD kernel (basis-wasm.ts, the same numbers) once there is a first basis vector
  let sweep: BasisSweep | null | undefined;
  try {
  for (;;) {
    let rest = 0, best = -1, bestN = -1;
    for (let c = 0; c < count; c++) {
      rest += norm2[c]!;
      if (norm2[c]! > bestN) {
        bestN = norm2[c]!;
        best = c;
      }
    }
    if (rest <= tol * tol * total) return basis;
    if (basis.length >= maxRank || bestN <= 0) return null;
    const q = new Float64Array(2 * m);
    // the pivot's residual (on the kernel's memory once it sweeps)
    const src = sweep ? sweep.columns : y;
    for (let k = 0; k < 2 * m; k++) q[k] = src[best * 2 * m + k]!;
    for (let pass = 0; pass < 2; pass++) {
      for (const b of basis) {
        let pr = 0, pi = 0;
        for (let k = 0; k < m; k++) {
          pr += b[2 * k]! * q[2 * k]! + b[2 * k + 1]! * q[2 * k + 1]!;
          pi += b[2 * k]! * q[2 * k + 1]! - b[2 * k + 1]! * q[2 * k]!;
        }
        for (let k = 0; k < m; k++) {
          q[2 * k] = q[2 * k]! - (b[2 * k]! * pr - b[2 * k + 1]! * pi);
          q[2 * k + 1] = q[2 * k + 1]! - (b[2 * k]! * pi + b[2 * k + 1]! * pr);
        }
      }
    }
    let nq = 0;
    for (let k = 0; k < 2 * m; k++) nq += q[k]! ** 2;
    nq = Math.sqrt(nq);
    if (!(nq > 0)) return null;
    for (let k = 0; k < 2 * m; k++) q[k] = q[k]! / nq;
    basis.push(q);
    if (sweep === undefined) sweep = m * count >= SWEEP_MIN ? BasisSweep.make(y, m, count, wasm) : null;
    if (sweep) sweep.remove(q, norm2);
    else {
      for (let c = 0; c < count; c++) {
        if (norm2[c] === 0) continue;
        norm2[c] = removeComponent(y, c * 2 * m, q, m);
      }
    }
  }
  } finally {
    // the residuals in y, as the twin leaves them
    if (sweep) sweep.residualsInto(y);
  }
}

/**
 * y_c ← y_c − q·(q^H·y_c) for the column at y[o …] (length m, interleaved);
 * returns its squared norm after. A function of its own: called once per
 * column and basis vector, it is optimised early even in a fresh process
 * (a loop in pivotedBasis would first run in the interpreter).
 */
function removeComponent(y: Float64Array, o: number, q: Float64Array, m: number): number {
  let pr = 0, pi = 0;
  for (let k = 0; k < m; k++) {
    pr += q[2 * k]! * y[o + 2 * k]! + q[2 * k + 1]! * y[o + 2 * k + 1]!;
    pi += q[2 * k]! * y[o + 2 * k + 1]! - q[2 * k + 1]! * y[o + 2 * k]!;
  }
  let s = 0;
  for (let k = 0; k < m; k++) {
    const r = y[o + 2 * k]! - (q[2 * k]! * pr - q[2 * k + 1]! * pi);
    const i = y[o + 2 * k + 1]! - (q[2 * k]! * pi + q[2 * k + 1]! * pr);
    y[o + 2 * k] = r;
    y[o + 2 * k + 1] = i;
    s += r * r + i * i;
  }
  return s;
}

/** coef[c·R + r] = basis_r^H · x_c for columns x_c (length m, interleaved) of `x`. */
export function project(basis: Float64Array[], x: Float64Array, m: number, count: number): Float64Array {
  const R = basis.length, coef = new Float64Array(2 * count * R);
  for (let c = 0; c < count; c++) {
    const o = c * 2 * m;
    for (let r = 0; r < R; r++) {
      const b = basis[r]!;
      let pr = 0, pi = 0;
      for (let k = 0; k < m; k++) {
        pr += b[2 * k]! * x[o + 2 * k]! + b[2 * k + 1]! * x[o + 2 * k + 1]!;
        pi += b[2 * k]! * x[o + 2 * k + 1]! - b[2 * k + 1]! * x[o + 2 * k]!;
      }
      coef[2 * (c * R + r)] = pr;
      coef[2 * (c * R + r) + 1] = pi;
    }
  }
  return coef;
}

// ---------------------------------------------------------------------------
// Class playback: P_c(n) for every class and readout (the spoiled shortcut's numbers).

type Adc = Extract<Op, { kind: "adc" }>;

export interface History {
  /** Readout ops in order, with their block's gradient areas since the last pulse (T·s/m) and gradient·dwell. */
  adcs: { op: Adc; area: [number, number, number]; step: [number, number, number]; dwell: number; active: boolean }[];
  /** P[n·C + c] (interleaved) for readout n, class c. */
  P: Float64Array;
  /** Class of each: grid index iw, magnetization Σ m0. */
  classIw: Int32Array;
  mass: Float64Array;
}

/** Each class's grid index iw and magnetization Σ|m0|, from stored isochromats. */
function isoClassInfo(plan: EnginePlan, iso: IsochromatSet): { classIw: Int32Array; mass: Float64Array } {
  const classIw = new Int32Array(plan.classes).fill(-1), mass = new Float64Array(plan.classes);
  const { rfClass } = plan;
  for (let i = 0; i < iso.count; i++) {
    const c = rfClass[i]!;
    if (classIw[c]! < 0) classIw[c] = iso.iw[i]!;
    mass[c] = mass[c]! + Math.abs(iso.m0[i]!);
  }
  return { classIw, mass };
}

function classHistory(seq: Sequence, plan: EnginePlan, info: { classIw: Int32Array; mass: Float64Array }): History | string {
  const C = plan.classes;
  const adcBlocks: { area: [number, number, number]; step: [number, number, number]; dwell: number }[] = [];
  {
    let acc: [number, number, number] = [0, 0, 0];
    for (const b of seq.blocks) {
      if (b.kind === "rf") acc = [0, 0, 0];
      else if (b.kind === "free") acc = [acc[0] + b.area[0], acc[1] + b.area[1], acc[2] + b.area[2]];
      else if (b.kind === "adc") {
        adcBlocks.push({ area: [...acc], step: [b.grad[0] * b.dwell, b.grad[1] * b.dwell, b.grad[2] * b.dwell], dwell: b.dwell });
        const T = b.samples * b.dwell;
        acc = [acc[0] + b.grad[0] * T, acc[1] + b.grad[1] * T, acc[2] + b.grad[2] * T];
      }
    }
  }
  const nAdc = plan.ops.filter((o) => o.kind === "adc").length;
  if (nAdc !== adcBlocks.length) return "internal: readouts of the plan and the sequence differ";
  if (C * nAdc > MAX_CLASS_LINES) return `${C.toLocaleString("en")} RF classes × ${nAdc} readouts is beyond the line factor's size (many RF classes: through-slice or through-slab positions × spectral components × the T2′ spread, or a B0 model)`;
  const { classIw, mass } = info;
  const { classDf, classR1, classR2 } = plan.rf;
  const D: Float64Array[] = [], E1: Float64Array[] = [];
  for (let q = 0; q < plan.durations.length; q++) {
    const t = plan.durations[q]!, d = new Float64Array(2 * C), e = new Float64Array(C);
    for (let c = 0; c < C; c++) {
      const e2 = Math.exp(-t * classR2[c]!), th = -2 * Math.PI * classDf[c]! * t;
      d[2 * c] = e2 * Math.cos(th);
      d[2 * c + 1] = e2 * Math.sin(th);
      e[c] = Math.exp(-t * classR1[c]!);
    }
    D.push(d);
    E1.push(e);
  }
  const mz = new Float64Array(C).fill(1), pr = new Float64Array(C), pi = new Float64Array(C);
  const P = scratchF64("P", 2 * C * nAdc);
  const maps = plan.rfMaps, tab = plan.tab;
  const adcs: History["adcs"] = [];
  // per class: its offset in a slice phase table; per (duration, slice table) of a free interval the
  // factor slice phase × (decay, precession) per class, made once (the same product each time it is used)
  const iw2 = new Int32Array(C);
  for (let c = 0; c < C; c++) iw2[c] = 2 * Math.max(0, classIw[c]!);
  const freeQ = new Map<number, Float64Array>();
  const freeOf = (durationIndex: number, sliceTable: number): Float64Array => {
    const key = durationIndex * tab.length + sliceTable;
    let q = freeQ.get(key);
    if (!q) {
      q = freeFactors(D[durationIndex]!, tab, sliceTable, iw2, C);
      freeQ.set(key, q);
    }
    return q;
  };
  let active = false;
  // the loops over the classes in small functions (V8 optimises them; here they would stay in this body)
  const ops = plan.ops;
  for (let i = 0; i < ops.length; i++) {
    const op = ops[i]!;
    // a TR's usual ops in one pass over the classes (each class gets the same operations in the same order)
    // (the fused passes take the pulse on Mz alone: no transverse part before it)
    if (op.kind === "rf" && !active && fusedHistory.on()) {
      const a = ops[i + 1], b = ops[i + 2], c = ops[i + 3], d = ops[i + 4];
      if (a?.kind === "spoil" && b?.kind === "relax") {
        // a TR without a readout (a dummy scan): the pulse's Mz, then its relaxation
        rfSpoilRelax(maps, op.mapOffset, C, mz, E1[b.durationIndex]!);
        active = false;
        i += 2;
        continue;
      }
      if (a?.kind === "free" && b?.kind === "adc" && c?.kind === "spoil" && d?.kind === "relax") {
        const q = freeOf(a.durationIndex, a.sliceTable);
        const n = adcs.length, blk = adcBlocks[n]!;
        adcs.push({ op: b, area: blk.area, step: blk.step, dwell: blk.dwell, active: true });
        rfReadoutRelax(maps, op.mapOffset, C, mz, pr, pi, op.cosPhase, op.sinPhase, E1[a.durationIndex]!, q, P, 2 * n * C, E1[d.durationIndex]!);
        active = false;
        i += 4;
        continue;
      }
    }
    switch (op.kind) {
      case "rf":
        // a transverse part before the pulse (a balanced sequence: plan.classState) goes through the whole map
        if (active) rfClassesFull(maps, op.mapOffset, C, mz, pr, pi, op.cosPhase, op.sinPhase);
        else rfClasses(maps, op.mapOffset, C, mz, pr, pi, op.cosPhase, op.sinPhase);
        active = true;
        break;
      case "free": {
        relaxClasses(mz, E1[op.durationIndex]!, C);
        if (!active) break;
        rotateClasses(pr, pi, freeOf(op.durationIndex, op.sliceTable), C);
        break;
      }
      case "relax":
        relaxClasses(mz, E1[op.durationIndex]!, C);
        break;
      case "spoil":
        active = false;
        break;
      case "adc": {
        const n = adcs.length, blk = adcBlocks[n]!;
        adcs.push({ op, area: blk.area, step: blk.step, dwell: blk.dwell, active });
        if (active) storeClasses(P, 2 * n * C, pr, pi, C);
        break;
      }
    }
  }
  return { adcs, P, classIw, mass };
}

/**
 * rfClasses, then an ideal spoil and relaxClasses, in one pass: per class the same operations in the same
 * order (the transverse values the pulse makes are spoiled before any readout, so they are not kept).
 */
function rfSpoilRelax(maps: Float64Array, mapOffset: number, C: number, mz: Float64Array, e1: Float64Array): void {
  for (let c = 0; c < C; c++) {
    const b = mapOffset + c * 12, m = maps[b + 8]! * mz[c]! + maps[b + 11]!;
    mz[c] = m * e1[c]! + (1 - e1[c]!);
  }
}

/**
 * rfClasses, a free interval (relaxClasses with e1a, rotateClasses by q), the readout (storeClasses at o),
 * an ideal spoil and relaxClasses with e1b, in one pass: per class the same operations in the same order.
 */
function rfReadoutRelax(
  maps: Float64Array, mapOffset: number, C: number, mz: Float64Array, pr: Float64Array, pi: Float64Array, cp: number, sp: number,
  e1a: Float64Array, q: Float64Array, P: Float64Array, o: number, e1b: Float64Array,
): void {
  for (let c = 0; c < C; c++) {
    const b = mapOffset + c * 12, z = mz[c]!;
    const x = maps[b + 2]! * z + maps[b + 9]!, y = maps[b + 5]! * z + maps[b + 10]!;
    const m = maps[b + 8]! * z + maps[b + 11]!;
    const r0 = x * cp - y * sp, i0 = x * sp + y * cp;
    const m1 = m * e1a[c]! + (1 - e1a[c]!);
    const qr = q[2 * c]!, qi = q[2 * c + 1]!;
    const r1 = r0 * qr - i0 * qi, i1 = r0 * qi + i0 * qr;
    P[o + 2 * c] = r1;
    P[o + 2 * c + 1] = i1;
    pr[c] = r1;
    pi[c] = i1;
    mz[c] = m1 * e1b[c]! + (1 - e1b[c]!);
  }
}

const fusedHistory = kernelSwitch();

/** Switches the one-pass TRs of the class playback off (tests: the op-by-op playback, the same bits); returns the previous setting. */
export function setFusedHistory(on: boolean): boolean {
  return fusedHistory.set(on);
}

/** An RF pulse on every class: its affine map of (0, 0, Mz) (no transverse state before a pulse of an ideally spoiled sequence), then the pulse phase. */
function rfClasses(maps: Float64Array, mapOffset: number, C: number, mz: Float64Array, pr: Float64Array, pi: Float64Array, cp: number, sp: number): void {
  for (let c = 0; c < C; c++) {
    const b = mapOffset + c * 12, z = mz[c]!;
    const x = maps[b + 2]! * z + maps[b + 9]!, y = maps[b + 5]! * z + maps[b + 10]!;
    mz[c] = maps[b + 8]! * z + maps[b + 11]!;
    pr[c] = x * cp - y * sp;
    pi[c] = x * sp + y * cp;
  }
}

/** The pulse's affine map on every class's whole state (m0 = 1), in the pulse's frame: as applyRf (kernels.ts). */
function rfClassesFull(maps: Float64Array, mapOffset: number, C: number, mz: Float64Array, pr: Float64Array, pi: Float64Array, cp: number, sp: number): void {
  const out = new Float64Array(3);
  for (let c = 0; c < C; c++) {
    rfOnState(maps, mapOffset + c * 12, pr[c]!, pi[c]!, mz[c]!, cp, sp, out);
    pr[c] = out[0]!;
    pi[c] = out[1]!;
    mz[c] = out[2]!;
  }
}

/** Mz ← Mz·E1 + (1 − E1) for every class. */
function relaxClasses(mz: Float64Array, e1: Float64Array, C: number): void {
  for (let c = 0; c < C; c++) mz[c] = mz[c]! * e1[c]! + (1 - e1[c]!);
}

/** q[c] = (slice phase of the class's through-slice index) × d[c] (decay and precession over the interval). */
function freeFactors(d: Float64Array, tab: Float64Array, sliceTable: number, iw2: Int32Array, C: number): Float64Array {
  const q = new Float64Array(2 * C);
  for (let c = 0; c < C; c++) {
    const ow = sliceTable + iw2[c]!;
    const wr = tab[ow]!, wi = tab[ow + 1]!, dr = d[2 * c]!, di = d[2 * c + 1]!;
    q[2 * c] = wr * dr - wi * di;
    q[2 * c + 1] = wr * di + wi * dr;
  }
  return q;
}

/** (pr + i·pi)[c] ← (pr + i·pi)[c]·q[c]. */
function rotateClasses(pr: Float64Array, pi: Float64Array, q: Float64Array, C: number): void {
  for (let c = 0; c < C; c++) {
    const qr = q[2 * c]!, qi = q[2 * c + 1]!, xr = pr[c]!, xi = pi[c]!;
    pr[c] = xr * qr - xi * qi;
    pi[c] = xr * qi + xi * qr;
  }
}

/** P[o + 2c] = pr[c], P[o + 2c + 1] = pi[c]. */
function storeClasses(P: Float64Array, o: number, pr: Float64Array, pi: Float64Array, C: number): void {
  for (let c = 0; c < C; c++) {
    P[o + 2 * c] = pr[c]!;
    P[o + 2 * c + 1] = pi[c]!;
  }
}

/** A reason the fast operator cannot apply, found from the plan alone (before the RF maps are filled), or null. */
export function fastPrecheck(plan: EnginePlan): string | null {
  if (!plan.classState) return "the magnetization before a pulse depends on the in-plane position (two or more pulses between ideal spoils, with in-plane gradient moments left between them): the fast operator covers ideally spoiled and balanced Cartesian readouts so far";
  let nAdc = 0;
  for (const o of plan.ops) if (o.kind === "adc") nAdc++;
  if (plan.classes * nAdc > MAX_CLASS_LINES) return `${plan.classes.toLocaleString("en")} RF classes × ${nAdc} readouts is beyond the line factor's size (many RF classes: through-slice or through-slab positions × spectral components × the T2′ spread, or a B0 model)`;
  return null;
}

// ---------------------------------------------------------------------------

export interface FastResult {
  re: Float64Array;
  im: Float64Array;
  report: ReadoutReport;
}

/**
 * The fast operator for the plan (RF maps filled), each factor truncated at
 * tolerance/split (in norms weighted by magnetization). Returns the k-space
 * [coil][row][read] and what it did, or a string saying why it does not
 * apply (the caller then runs the direct operator).
 */
export function fastReadout(seq: Sequence, plan: EnginePlan, iso: IsochromatSet, tolerance: number, split = 8, helper = true): FastResult | string {
  return fastReadoutFrom(seq, plan, { kind: "iso", iso }, tolerance, split, helper);
}

/**
 * Where the fast operator's weights come from: stored isochromats, or the
 * phantom's sampled cells streamed column by column (fast-stream.ts; nothing
 * stored per isochromat).
 */
export type FastSource = { kind: "iso"; iso: IsochromatSet } | { kind: "cells"; stream: CellStream };

/** The fast operator on either source (see {@link fastReadout}). */
export function fastReadoutFrom(seq: Sequence, plan: EnginePlan, src: FastSource, tolerance: number, split = 8, allowHelper = true): FastResult | string {
  const pre = fastPrecheck(plan);
  if (pre) return pre;
  const h = classHistory(seq, plan, src.kind === "iso" ? isoClassInfo(plan, src.iso) : src.stream.classInfo());
  if (typeof h === "string") return h;
  const whole = fastLines(seq, plan, src, h, null, tolerance, split, allowHelper);
  if (whole !== LINE_RANK_FAILED) return whole;
  // 3D: each slab position's excitation state carries its slice-encoding phase exp(−i2π kz·z), so the line
  // factor's rank across the lines is about the number of slice-encoding steps. Within one step it is the
  // low rank of the transient alone: the operator runs per step (each on that step's lines, rows disjoint).
  const groups = sliceEncodingGroups(h);
  if (groups === null) return whole;
  return fastPerGroup(groups, plan.rows * plan.read, plan.read, split, tolerance, (keep, s) => fastLines(seq, plan, src, h, keep, tolerance, s, allowHelper));
}

/** fastLines' answer where the line factor's rank exceeds MAX_RANK. */
const LINE_RANK_FAILED = `the magnetization differs too much between lines (line rank above ${MAX_RANK}, e.g. 3D encoding in the excitation): not covered by the fast operator yet`;

/**
 * The active readouts grouped by their slice-encoding moment kz = γ̄·∫G_slice (one group per slice-encoding
 * step, as a 0/1 mask over the readouts), or null where all share one kz.
 */
function sliceEncodingGroups(h: { adcs: History["adcs"] }): { mask: Uint8Array; rows: number[] }[] | null {
  const byKz = new Map<number, { mask: Uint8Array; rows: number[] }>();
  h.adcs.forEach((a, n) => {
    if (!a.active) return;
    // kz in cycles/m rounded to 1e-6 (a slab's step is of order 10 cycles/m)
    const key = Math.round(GAMMA_BAR * a.area[2] * 1e6);
    let g = byKz.get(key);
    if (!g) byKz.set(key, (g = { mask: new Uint8Array(h.adcs.length), rows: [] }));
    g.mask[n] = 1;
    if (!g.rows.includes(a.op.row)) g.rows.push(a.op.row);
  });
  if (byKz.size < 2) return null;
  // the groups' rows must be disjoint (each row's k-space comes from one group)
  const seen = new Set<number>();
  for (const g of byKz.values()) for (const r of g.rows) {
    if (seen.has(r)) return null;
    seen.add(r);
  }
  return [...byKz.keys()].sort((a, b) => a - b).map((k) => byKz.get(k)!);
}

/**
 * The fast operator run once per group of readouts (`run(mask, split)`), each group's rows (`rows`, disjoint)
 * copied into one k-space, and reported together: the largest rank, segment count and split, the pairs summed,
 * and the estimate as the groups' errors added in quadrature relative to the whole k-space (each group's relative
 * estimate × its k-space's norm). While that is over the tolerance, the group of the largest error is run again
 * with its factors truncated 10 times tighter (up to 100 times) and its rows replaced: a group of little signal
 * (an outer slice-encoding step) may keep a larger relative error, as its share of the whole is small. Only the
 * whole k-space and one group's result are held at a time.
 */
function fastPerGroup(
  groups: { mask: Uint8Array; rows: number[] }[], coilLength: number, rowLength: number, split: number, tolerance: number,
  run: (keep: Uint8Array, split: number) => FastResult | string,
): FastResult | string {
  const G = groups.length, rel = new Float64Array(G), n2 = new Float64Array(G), at = new Float64Array(G);
  const reports: ReadoutReport[] = [];
  let re: Float64Array | null = null, im: Float64Array | null = null;
  const err2 = (g: number) => rel[g]! * rel[g]! * n2[g]!;
  const once = (g: number, s: number): string | null => {
    const r = run(groups[g]!.mask, s);
    if (typeof r === "string") return `per slice-encoding step: ${r}`;
    re ??= new Float64Array(r.re.length);
    im ??= new Float64Array(r.im.length);
    // the group's rows of every coil (coilLength values per coil, rowLength per row)
    let m = 0;
    for (let q = 0; q * coilLength < r.re.length; q++) {
      for (const row of groups[g]!.rows) {
        const o = q * coilLength + row * rowLength;
        for (let k = o; k < o + rowLength; k++) {
          re[k] = r.re[k]!;
          im[k] = r.im[k]!;
          m += r.re[k]! * r.re[k]! + r.im[k]! * r.im[k]!;
        }
      }
    }
    rel[g] = r.report.estimate?.relL2 ?? 0;
    n2[g] = m;
    at[g] = s;
    reports[g] = r.report;
    return null;
  };
  for (let g = 0; g < G; g++) {
    const e = once(g, split);
    if (e) return e;
  }
  let norm2 = 0;
  for (let g = 0; g < G; g++) norm2 += n2[g]!;
  for (;;) {
    let worst = -1, e2 = 0;
    for (let g = 0; g < G; g++) {
      e2 += err2(g);
      if (at[g]! < 100 * split && (worst < 0 || err2(g) > err2(worst))) worst = g;
    }
    if (e2 <= tolerance * tolerance * norm2 || worst < 0) break;
    const e = once(worst, 10 * at[worst]!);
    if (e) return e;
  }
  // the steps' estimates as measured (before their floors), weighted by their k-space energy, then the floor
  let samples = 0, segments = 0, rank = 0, splitMax = 0, transformed = 0, skipped = 0, skippedBound = 0, m2 = 0;
  reports.forEach((r, g) => {
    m2 += (r.estimate?.measured ?? 0) ** 2 * n2[g]!;
    samples += r.estimate?.samples ?? 0;
    segments = Math.max(segments, r.segments ?? 0);
    rank = Math.max(rank, r.lineRank ?? 0);
    splitMax = Math.max(splitMax, r.split ?? 0);
    transformed += r.pairs?.transformed ?? 0;
    skipped += r.pairs?.skipped ?? 0;
    skippedBound += r.pairs?.skippedBound ?? 0;
  });
  const first = reports[0]!;
  const report: ReadoutReport = {
    ...first,
    method: `${first.method}, per slice-encoding step (${G} steps: the line factor is of low rank within a step)`,
    segments, lineRank: rank, lineGroups: G, split: splitMax,
    ...(first.pairs ? { pairs: { transformed, skipped, skippedBound } } : {}),
    estimate: flooredEstimate({ samples, seed: ESTIMATE_SEED, relL2: norm2 > 0 ? Math.sqrt(m2 / norm2) : 0 }, tolerance),
  };
  return { re: re!, im: im!, report };
}

/** The fast operator on the readouts of `keep` (all active ones for null), given the classes' history. */
function fastLines(
  seq: Sequence, plan: EnginePlan, src: FastSource, h: History, keep: Uint8Array | null, tolerance: number, split: number, allowHelper: boolean,
): FastResult | string {
  const { adcs, P, classIw, mass } = h;
  const C = plan.classes, coils = plan.coils, sens = plan.sens;
  // written out, not spread: a spread's copy takes its shape from the source objects, and a shape that
  // changes between runs throws away this function's compiled code (a second or more of compiling for V8)
  const act = adcs.map((a, n) => ({ op: a.op, area: a.area, step: a.step, dwell: a.dwell, active: a.active, n })).filter((a) => a.active && (keep === null || keep[a.n] === 1));
  const re = new Float64Array(coils * plan.rows * plan.read), im = new Float64Array(re.length);
  const base: ReadoutReport = { operator: "fast", requested: "fast", tolerance, method: "", kernelWidth: null };
  if (act.length === 0) return { re, im, report: { ...base, method: "no readout sees transverse magnetization", segments: 0, lineRank: 0, estimate: { samples: 0, seed: ESTIMATE_SEED, relL2: 0 } } };
  // --- one readout shape: samples, dwell, read step, filter; read gradient only; common read prephasing
  const a0 = act[0]!;
  const ns = a0.op.samples, dwell = a0.dwell, stepU = a0.step[0];
  for (const a of act) {
    if (a.op.groupByPhaseAndSlice || a.step[1] !== 0 || a.step[2] !== 0) return "the readout gradient has a phase or slice part (oblique readout): not covered by the fast operator yet";
    if (a.op.samples !== ns || a.dwell !== dwell || a.step[0] !== stepU || a.op.readHzPerMetre !== a0.op.readHzPerMetre || a.op.sampledBandwidth !== a0.op.sampledBandwidth) {
      return "readouts differ in samples, dwell or read gradient (e.g. EPI): not covered by the fast operator yet";
    }
  }
  const dkx = GAMMA_BAR * stepU;
  const kx0 = GAMMA_BAR * a0.area[0];
  for (const a of act) {
    if (Math.abs(GAMMA_BAR * a.area[0] - kx0) > 1e-9 * Math.abs(dkx)) return "readouts start at different read positions in k-space (e.g. EPI): not covered by the fast operator yet";
  }
  const { uGrid, vGrid } = src.kind === "iso" ? src.iso : src.stream.cells;
  // --- DFT lengths: Δkx·du = ±1/Mu and Δky·dv·(line offsets) = m/Mv with whole Mu, Mv (else the grid is not a DFT grid)
  let Mu = 1, su = 1;
  if (uGrid.length > 1) {
    const du = uGrid[1]! - uGrid[0]!, x = 1 / (Math.abs(dkx) * du);
    Mu = Math.round(x);
    su = dkx < 0 ? -1 : 1;
    if (!(dkx !== 0) || !(Mu >= 1) || Math.abs(x - Mu) > 1e-7 || Mu > 1 << 22) return `read sampling step × grid step is not 1/whole number (${x}): not covered by the fast operator`;
  }
  // a typed array: its shape is the same in every run (an array's elements kind can change between runs, and with it the
  // shape this function's compiled code expects)
  const ky = Float64Array.from(act, (a) => GAMMA_BAR * a.area[1]);
  const kyRef = ky[0]!;
  const mLine = new Int32Array(act.length);
  let Mv = 1;
  if (vGrid.length > 1) {
    const dv = vGrid[1]! - vGrid[0]!;
    let step = Infinity;
    for (const k of ky) {
      const d = Math.abs(k - kyRef) * dv;
      if (d > 1e-12 && d < step) step = d;
    }
    if (Number.isFinite(step)) {
      const x = 1 / step;
      Mv = Math.round(x);
      if (!(Mv >= 1) || Math.abs(x - Mv) > 1e-7 || Mv > 1 << 22) return `phase-encoding step × grid step is not 1/whole number (${x}): not covered by the fast operator`;
      for (let k = 0; k < ky.length; k++) {
        const m = (ky[k]! - kyRef) * dv * Mv;
        const r = Math.round(m);
        if (Math.abs(m - r) > 1e-7) return "phase-encoding steps are not on one lattice: not covered by the fast operator";
        mLine[k] = ((r % Mv) + Mv) % Mv;
      }
    }
  }
  if (Mu * Mv * coils * 16 * 4 > 2 ** 31) return `the folded grid ${Mv}×${Mu} × ${coils} coils is too large for the fast operator`;
  const NA = act.length;
  // a B0 model interpolated in Δf: the probes at exact Δf against their nodes (stream.interpolationError)
  const interpErr = src.kind === "cells" && src.stream.interp ? src.stream.interpolationError(P, C, act.map((a) => a.n), ns, dwell) : null;
  // --- line factor: P_c(n) ≈ Σ_r A_r(n)·G_r(c), weighted by each class's magnetization
  const tolLine = tolerance / split, tolTime = tolerance / split;
  const y = scratchF64("y", 2 * NA * C);
  lineValues(P, act.map((a) => a.n), C, mass, y);
  const A = pivotedBasis(y, NA, C, tolLine, MAX_RANK, plan.wasm);
  if (!A) return LINE_RANK_FAILED;
  const G = projectLines(A, P, act.map((a) => a.n), C, plan.wasm); // G[c·R + r]
  const R = A.length;
  // --- time factor over distinct (R2, Δf)
  const { keyOf, keyDf, keyR2, K, E, ey } = timeKeys(plan, G, R, mass, ns, dwell);
  const B = pivotedBasis(ey, ns, K, tolTime, MAX_SEGMENTS, plan.wasm);
  if (!B) return `the (R2, Δf) spread needs more than ${MAX_SEGMENTS} time segments at tolerance ${tolerance}: not covered by the fast operator`;
  const L = B.length;
  const Ck = project(B, E, ns, K); // C[k·L + l]
  // --- pre-phases (per grid index), post-phases (per sample, per line)
  const nu = uGrid.length, nv = vGrid.length;
  const preU = new Float64Array(2 * nu), preV = new Float64Array(2 * nv);
  for (let a = 0; a < nu; a++) {
    const th = -TWO_PI * kx0 * uGrid[a]!;
    preU[2 * a] = Math.cos(th);
    preU[2 * a + 1] = Math.sin(th);
  }
  for (let b = 0; b < nv; b++) {
    const th = -TWO_PI * kyRef * vGrid[b]!;
    preV[2 * b] = Math.cos(th);
    preV[2 * b + 1] = Math.sin(th);
  }
  // per sample j and segment l: B_l(j)·exp(−i2π j·Δkx·u0)
  const BL = new Float64Array(2 * ns * L);
  for (let j = 0; j < ns; j++) {
    const th = -TWO_PI * j * dkx * uGrid[0]!, cr = Math.cos(th), ci = Math.sin(th);
    for (let l = 0; l < L; l++) {
      const br = B[l]![2 * j]!, bi = B[l]![2 * j + 1]!;
      BL[2 * (j * L + l)] = br * cr - bi * ci;
      BL[2 * (j * L + l) + 1] = br * ci + bi * cr;
    }
  }
  // per active line and rank r: c_n·exp(−i2π(ky_n − ky_ref)·v0)·A_r(n)
  const AL = new Float64Array(2 * NA * R);
  for (let k = 0; k < NA; k++) {
    const op = act[k]!.op, th = -TWO_PI * (ky[k]! - kyRef) * vGrid[0]!;
    const pr0 = Math.cos(th), pi0 = Math.sin(th);
    const cr = pr0 * op.weightRe - pi0 * op.weightIm, ci = pr0 * op.weightIm + pi0 * op.weightRe;
    for (let r = 0; r < R; r++) {
      const ar = A[r]![2 * k]!, ai = A[r]![2 * k + 1]!;
      AL[2 * (k * R + r)] = ar * cr - ai * ci;
      AL[2 * (k * R + r) + 1] = ar * ci + ai * cr;
    }
  }
  const fRead = a0.op.readHzPerMetre, bw = a0.op.sampledBandwidth;
  const colIdx = new Int32Array(ns);
  for (let j = 0; j < ns; j++) colIdx[j] = (((su * j) % Mu) + Mu) % Mu;
  const lineRow = act.map((a) => a.op.row);
  const maxAbs = (v: Float64Array) => {
    let m = 0;
    for (let k = 0; k < v.length; k += 2) m = Math.max(m, Math.hypot(v[k]!, v[k + 1]!));
    return m;
  };
  const maxB = B.map(maxAbs), maxA = A.map(maxAbs);
  // --- fold and transform per block of folded read columns (streamed: only a
  // block's grids exist at a time, and they stay in cache while transformed).
  // Grids interleaved per position (the fold writes every (rank, coil,
  // segment) of a position at once): XB[2·(((a − a0)·Mv + b)·NX + x)], x = (r·coils + q)·L + l.
  // Within a block, columns are folded in column order, so every position's
  // sum is added in the same order whatever the blocks.
  const grid = Mu * Mv;
  const NX = R * coils * L;
  const colBytes = 16 * Mv * NX;
  const blockCols = Math.max(1, Math.min(Mu, Math.floor(BLOCK_BYTES / colBytes)));
  if (colBytes * blockCols > GRID_BYTES) return `the folded grid ${Mv}×${Mu} × ${coils} coils × ${R} ranks × ${L} segments is too large for the fast operator`;
  let XB: Float64Array = new Float64Array(0);
  const colUsed = new Uint8Array(Mu);
  // the read index of a column (non-decreasing in column order)
  const nCols = src.kind === "iso" ? src.iso.columns : src.stream.cells.columns;
  const colAOf = src.kind === "iso"
    ? ((iso) => (col: number) => iso.iu[iso.colStart[col]!]!)(src.iso)
    : ((cells) => (col: number) => cells.colA[col]!)(src.stream.cells);
  if (src.kind === "iso") {
    const iso = src.iso;
    for (let col = 0; col < iso.columns; col++) if (iso.colStart[col + 1]! > iso.colStart[col]!) colUsed[iso.iu[iso.colStart[col]!]! % Mu] = 1;
  } else {
    for (const a of src.stream.cells.colA) colUsed[a % Mu] = 1;
  }
  /** First column whose read index is ≥ a. */
  const firstCol = (a: number) => {
    let lo = 0, hi = nCols;
    while (lo < hi) {
      const mid = (lo + hi) >> 1;
      if (colAOf(mid) < a) lo = mid + 1;
      else hi = mid;
    }
    return lo;
  };
  const aMax = nCols > 0 ? colAOf(nCols - 1) : -1;
  const blocks: { a0: number; a1: number; ranges: [number, number][] }[] = [];
  for (let a0 = 0; a0 < Mu; a0 += blockCols) {
    const a1 = Math.min(Mu, a0 + blockCols);
    const ranges: [number, number][] = [];
    for (let w = 0; w * Mu + a0 <= aMax; w++) {
      const c0 = firstCol(w * Mu + a0), c1 = firstCol(w * Mu + a1);
      if (c1 > c0) ranges.push([c0, c1]);
    }
    let used = false;
    for (let a = a0; a < a1; a++) used ||= colUsed[a] === 1;
    if (used && ranges.length > 0) blocks.push({ a0, a1, ranges });
  }
  // Z[q·L + l][a][n]: phase-transformed lines summed over the ranks (readAxis: Σ_l B_l(j)·F_l(n, j) per line),
  // one array holding the used read columns a only (at zCol[a]); the phase step per block (fast-phase.ts)
  // on this thread or shared with a helper thread. A weight folds into rows b mod Mv of the grid, b < nv:
  // rows ≥ min(nv, Mv) stay zero (not zeroed, summed, and skipped by the first FFT step where they are 3/4 of it).
  const zCol = new Int32Array(Mu).fill(-1), usedList: number[] = [];
  for (let a = 0; a < Mu; a++) {
    if (colUsed[a] === 0) continue;
    zCol[a] = usedList.length;
    usedList.push(a);
  }
  const usedCols = usedList.length, rows = Math.min(vGrid.length, Mv);
  const zStride = 2 * NA * usedCols;
  const setup = { Mv, NA, NX, R, L, coils, mLine, AL, Mu, rows, zCol, zCols: usedCols, wasm: plan.wasm };
  const helper = allowHelper && phaseHelper !== null && R * L * coils * Mv * usedCols >= phaseMinWork ? phaseHelper() : null;
  // with a helper and loop coils (plain data), the helper also evaluates the sensitivities of the blocks ahead of the fold
  const loops = src.kind === "cells" && coils > 1 ? src.stream.sens?.loops : undefined;
  const blockColumns = (blk: { ranges: [number, number][] }) => {
    const out: number[] = [];
    for (const [c0, c1] of blk.ranges) for (let c = c0; c < c1; c++) out.push(c);
    return out;
  };
  const sensAhead = helper && loops && src.kind === "cells"
    ? (() => {
        const cells = src.stream.cells, ax = cells.ctx.axes;
        const share = (a: Int32Array) => {
          const b = new SharedArrayBuffer(4 * Math.max(1, a.length));
          new Int32Array(b).set(a);
          return b;
        };
        let maxCols = 0;
        for (const blk of blocks) maxCols = Math.max(maxCols, blockColumns(blk).length);
        return {
          loops, coils, wasm: plan.wasm, uGrid: cells.uGrid, vGrid: cells.vGrid, wGrid: cells.wGrid,
          axes: { read: [...ax.read], phase: [...ax.phase], slice: [...ax.slice] },
          colA: share(cells.colA), colB: share(cells.colB), maxCols,
        };
      })()
    : undefined;
  // the read step too is shared (ParallelPhase.readAll: whole coils, or parts of one coil's lines)
  const usedA = Int32Array.from(usedList);
  const readShared = { BL, colIdx, usedA, ns };
  const par = helper ? new ParallelPhase(setup, colUsed, R * coils * L, 2 * blockCols * Mv * NX, sensAhead, readShared) : null;
  if (helper && par) helper.start(par.shared);
  // sensitivities of the first blocks asked for now (the helper evaluates them while this thread sets up the fold);
  // the helper evaluates them first, and this thread evaluates a job itself if the helper has not started it when the fold needs it
  const sensCols = par && sensAhead ? blocks.map(blockColumns) : [], sensJob = new Int32Array(sensCols.length).fill(-1);
  let sensNext = 0;
  const askSens = () => {
    while (par && sensNext < sensCols.length) {
      const j = par.requestSens(sensCols[sensNext]!, sensCols[sensNext]!.length);
      if (j < 0) return;
      sensJob[sensNext++] = j;
    }
  };
  if (coils > 1) askSens();
  try {
  const Zall: Float64Array = par ? par.Z : scratchF64("Z", zStride * coils * L);
  const own = par ? null : new PhaseTransform({ ...setup, Z: Zall, colUsed });
  // one block's grids on this thread (with a helper, its slots hold them)
  if (!par) XB = own!.inputBlock(2 * blockCols * Mv * NX) ?? scratchF64("XB", 2 * blockCols * Mv * NX);
  const Zof = (q: number) => Array.from({ length: L }, (_, l) => Zall.subarray((q * L + l) * zStride, (q * L + l + 1) * zStride));
  let cur = new Int32Array(0), curN = 0;
  /** The (grid, rank, coil, segment) entries the next blocks transform. */
  const setList = (entries: { x: number; r: number; q: number; l: number }[]) => {
    cur = new Int32Array(4 * entries.length);
    entries.forEach((e, i) => cur.set([e.x, e.r, e.q, e.l], 4 * i));
    curN = entries.length;
    if (par) {
      par.drain();
      par.setList(cur, curN);
    }
  };
  /** Folds a block (into a free slot of the helper's when there is one), `then` on its grids, and transforms it. */
  const foldTransform = (blk: { a0: number; a1: number; ranges: [number, number][] }, then?: (grids: Float64Array) => void) => {
    const dest = par ? par.acquire() : { slot: -1, grids: XB, track: null };
    foldBlock(blk, dest.grids, dest.track);
    if (par) par.seal(dest.slot);
    then?.(dest.grids);
    if (par) par.publish(dest.slot, blk.a0, blk.a1);
    else own!.run(XB, cur, curN, blk.a0, blk.a1);
  };
  const drain = () => par?.drain();
  // with sensitivities (one fold pass) the estimate's column sums are made in the fold's pass, sharing
  // each column's sensitivities (evaluated once); otherwise in a pass of their own before the last drain
  const actN = act.map((a) => a.n);
  const hooked = src.kind === "cells" && coils > 1 ? src.stream.estimateHooked(plan, h, actN, ky, kx0, dkx, ns, dwell, keyOf, keyDf, keyR2) : null;
  const sensSource: { fill: ((col: number, S: Float64Array | null, mom: Float64Array | null) => boolean) | null } = { fill: null };
  const folder = src.kind === "iso"
    ? foldPass(src.iso, plan, G, R, 0, R, keyOf, keyDf, K, preU, preV, Mu, Mv, fRead, bw, L, Ck, XB, NX)
    : src.stream.fold(plan, G, R, 0, R, keyOf, keyDf, K, preU, preV, Mu, Mv, fRead, bw, L, Ck, XB, NX, tolerance / split, hooked?.hook, sensSource);
  const foldBlock = (blk: { a0: number; a1: number; ranges: [number, number][] }, grids: Float64Array, track: SlotTrack | null) => {
    // a helper's slot is not zeroed: the fold tracks the positions it writes (ParallelPhase.seal zeroes what the block before left)
    if (!par) zeroBlock(grids, blk.a1 - blk.a0, Mv, NX, rows);
    for (const [c0, c1] of blk.ranges) folder(c0, c1, blk.a0, grids, track);
  };
  // One coil: pass 1 folds every block, sums the grids' norms, transforms rank 0
  // (it sets the budget of the pairs skipped); pass 2 folds again (cheap
  // without sensitivities) and transforms the other kept pairs.
  // Pairs (rank r, segment l) are transformed unless their contribution's bound
  // max|A_r|·max|B_l|·√(Mu·Mv)·‖X_{r,l}‖ (Parseval) is within an equal share of
  // tolerance/split of the norm of the rank-0 k-space; skipped pairs are counted.
  // With several coils the fold (sensitivities per column and coil) costs more
  // than the pairs a norm could skip: one pass, every pair transformed (none skipped).
  let kept = 0, skipped = 0, skippedBound = 0;
  const lines = scratchF64("lines", 2 * NA * ns);
  const { dft: dftU, zt } = readStep(Mu, L, plan.wasm, (n) => scratchF64("zt", n));
  if (coils > 1) {
    const all: { x: number; r: number; q: number; l: number }[] = [];
    for (let r = 0; r < R; r++) for (let q = 0; q < coils; q++) for (let l = 0; l < L; l++) all.push({ x: (r * coils + q) * L + l, r, q, l });
    setList(all);
    if (par && sensAhead) {
      // sensitivities of the next blocks requested ahead (askSens above)
      const cols = sensCols, job = sensJob, ask = askSens;
      const half = 2 * coils * sensAhead.wGrid.length, per = 2 * half;
      for (let k = 0; k < blocks.length; k++) {
        ask();
        if (job[k]! < 0) {
          // not requested (every job taken): the stream evaluates them
          sensSource.fill = null;
          foldTransform(blocks[k]!);
          continue;
        }
        const out = par.takeSens(job[k]!), list = cols[k]!;
        let at = 0;
        sensSource.fill = (col, S, mom) => {
          if (list[at] !== col) throw new Error("fast operator: sensitivities out of step with the fold");
          const o = at * per;
          if (S) S.set(out.subarray(o, o + half));
          if (mom) mom.set(out.subarray(o + half, o + per));
          at++;
          return true;
        };
        foldTransform(blocks[k]!);
        sensSource.fill = null;
        par.releaseSens(job[k]!);
      }
    } else for (const blk of blocks) foldTransform(blk);
    kept = all.length;
  } else {
  const n2 = new Float64Array(NX);
  const list0: { x: number; r: number; q: number; l: number }[] = [];
  for (let q = 0; q < coils; q++) for (let l = 0; l < L; l++) list0.push({ x: q * L + l, r: 0, q, l });
  setList(list0);
  for (const blk of blocks) foldTransform(blk, (grids) => addNorms(grids, blk.a0, blk.a1, colUsed, Mv, NX, rows, n2));
  drain();
  kept += list0.length;
  let n2k = 0;
  const lines0 = par ? par.readAll(0) : null;
  for (let q = 0; q < coils; q++) {
    if (!lines0) readAxis(Zof(q), NA, Mu, ns, BL, colIdx, dftU, zt, lines, usedA, plan.wasm);
    const v = lines0 ? lines0[q]! : lines;
    for (let k = 0; k < NA; k++) n2k += sumSquares(v.subarray(2 * k * ns, 2 * (k + 1) * ns));
  }
  // the pairs of least bound are skipped while their bounds add up to at most tolerance/split of the rank-0
  // k-space's norm (by the triangle inequality, the skipped part's norm is within that): the guarantee of an
  // equal share per pair, spent where the bounds are smallest (ties in pair order, so the choice is the same on any machine)
  const budget = (tolerance / split) * Math.sqrt(n2k);
  const pairs: { x: number; r: number; q: number; l: number; bound: number }[] = [];
  for (let r = 1; r < R; r++) {
    for (let q = 0; q < coils; q++) {
      for (let l = 0; l < L; l++) {
        const x = (r * coils + q) * L + l;
        pairs.push({ x, r, q, l, bound: maxA[r]! * maxB[l]! * Math.sqrt(grid * n2[x]!) });
      }
    }
  }
  const skip = new Uint8Array(NX);
  for (const p of pairSkipping.on() ? pairs.slice().sort((a, b) => a.bound - b.bound || a.x - b.x) : []) {
    if (!(skippedBound + p.bound <= budget)) break;
    skip[p.x] = 1;
    skipped++;
    skippedBound += p.bound;
  }
  const list = pairs.filter((p) => skip[p.x] === 0).map(({ x, r, q, l }) => ({ x, r, q, l }));
  if (list.length > 0) {
    setList(list);
    for (const blk of blocks) foldTransform(blk);
  }
  kept += list.length;
  }
  // the estimate's direct sums (independent of the fold) while the last blocks are transformed
  const finishEstimate = hooked ? hooked.finish : src.kind === "iso"
    ? estimate(plan, src.iso, h, actN, ky, kx0, dkx, ns, dwell, keyOf, keyDf, keyR2)
    : src.stream.estimate(plan, h, actN, ky, kx0, dkx, ns, dwell, keyOf, keyDf, keyR2);
  drain();
  // read-axis DFT of each line, times B_l(j), summed over l into the rows (with a helper: on both threads)
  const perCoil = par ? par.readAll(coils > 1 ? 0 : 1) : null;
  for (let q = 0; q < coils; q++) {
    if (!perCoil) readAxis(Zof(q), NA, Mu, ns, BL, colIdx, dftU, zt, lines, usedA, plan.wasm);
    const v = perCoil ? perCoil[q]! : lines;
    for (let k = 0; k < NA; k++) {
      const ob = (q * plan.rows + lineRow[k]!) * plan.read;
      addLine(re, im, ob, v, 2 * k * ns, ns);
    }
  }
  const report: ReadoutReport = {
    ...base,
    method: "time segmentation (least-squares interpolators) × low-rank line factor × exact DFT of the sub-voxel grid (FFT, folded)",
    segments: L, lineRank: R, grid: [Mv, Mu], split, pairs: { transformed: kept, skipped, skippedBound: skippedBound },
  };
  if (src.kind === "cells" && coils > 1) {
    const st = src.stream.sensStats;
    report.sensitivityTerms = { pairs: st.columns, meanKept: st.columns > 0 ? st.terms / st.columns : 0, of: st.of, maxBound: st.maxRel };
  }
  report.estimate = finishEstimate(re, im);
  if (interpErr !== null && src.kind === "cells" && src.stream.interpReport) {
    // the interpolation's own error, beside the estimate (which checks the operator against the nodes' exact states)
    report.b0Interpolation = { ...src.stream.interpReport, maxRelError: interpErr, ...src.stream.interpStats };
    // the shift tables interpolate once more, in each entry's B0, on the same lattice and order: within the same bound
    // as the nodes (its derivatives are those of the same signal), so twice the probes' error where they were used
    const twice = src.stream.interpStats.tableColumns > 0 ? 2 : 1;
    report.estimate.relL2 = Math.hypot(report.estimate.relL2, ESTIMATE_MARGIN * twice * interpErr);
  }
  report.estimate = flooredEstimate(report.estimate, tolerance);
  return { re, im, report };
  } finally {
    helperBlocks = par ? par.end() : 0;
  }
}


/**
 * XB[xb + 2l] += (wr + i·wi)·C[k][l] for the L time segments: one weight
 * folded into its grid position's (rank, coil) run (shared by the stored and
 * the streamed fold).
 */
export function addSegments(XB: Float64Array, xb: number, wr: number, wi: number, Ck: Float64Array, k: number, L: number): void {
  for (let l = 0; l < L; l++) {
    const cr = Ck[2 * (k * L + l)]!, ci = Ck[2 * (k * L + l) + 1]!, o = xb + 2 * l;
    XB[o] = XB[o]! + (wr * cr - wi * ci);
    XB[o + 1] = XB[o + 1]! + (wr * ci + wi * cr);
  }
}

/**
 * One pass over the isochromats for ranks r0 … r1−1: per column and (R2, Δf)
 * key the rank weights Σ m0·G_r(c)·S_q, times the pre-phases and the
 * receiver filter, folded into the grids XB at x = ((r − r0)·coils + q)·L + l with
 * the segment coefficients C_l(key).
 */
function foldPass(
  iso: IsochromatSet, plan: EnginePlan, G: Float64Array, R: number, r0: number, r1: number, keyOf: Int32Array, keyDf: number[], K: number,
  preU: Float64Array, preV: Float64Array, Mu: number, Mv: number, fRead: number, bw: number, L: number, Ck: Float64Array, XB0: Float64Array, NX: number,
): ColumnFolder {
  const coils = plan.coils, sens = plan.sens, filt = plan.receiverFilter, rfClass = plan.rfClass, count = iso.count;
  const { iu, iv, m0, colStart, uGrid } = iso;
  const W = r1 - r0, CW = coils * W;
  const accR = new Float64Array(K * CW), accI = new Float64Array(K * CW);
  const touched = new Int32Array(K), seen = new Uint8Array(K);
  void XB0;
  return (c0, c1, aBase, XB, track) => {
  for (let col = c0; col < c1; col++) {
    const i0 = colStart[col]!, i1 = colStart[col + 1]!;
    if (i1 <= i0) continue;
    let nt = 0;
    for (let i = i0; i < i1; i++) {
      const c = rfClass[i]!, k = keyOf[c]!, m = m0[i]!;
      if (seen[k] === 0) {
        seen[k] = 1;
        touched[nt++] = k;
      }
      const g = 2 * (c * R + r0);
      if (sens === null) {
        const o = k * W;
        for (let r = 0; r < W; r++) {
          accR[o + r] = accR[o + r]! + G[g + 2 * r]! * m;
          accI[o + r] = accI[o + r]! + G[g + 2 * r + 1]! * m;
        }
      } else {
        for (let q = 0; q < coils; q++) {
          const so = 2 * (q * count + i), s0 = sens[so]! * m, s1 = sens[so + 1]! * m, o = (k * coils + q) * W;
          for (let r = 0; r < W; r++) {
            const gr = G[g + 2 * r]!, gi = G[g + 2 * r + 1]!;
            accR[o + r] = accR[o + r]! + (gr * s0 - gi * s1);
            accI[o + r] = accI[o + r]! + (gr * s1 + gi * s0);
          }
        }
      }
    }
    const a = iu[i0]!, b = iv[i0]!;
    const ur = preU[2 * a]!, ui = preU[2 * a + 1]!, vr = preV[2 * b]!, vi = preV[2 * b + 1]!;
    const pr0 = ur * vr - ui * vi, pi0 = ur * vi + ui * vr;
    const p = 2 * ((a % Mu - aBase) * Mv + (b % Mv));
    const u = uGrid[a]!;
    if (track) openPosition(track, XB, p >> 1, NX);
    for (let t = 0; t < nt; t++) {
      const k = touched[t]!;
      seen[k] = 0;
      const hk = filt ? receiverFilter(fRead * u + keyDf[k]!, bw) : 1;
      const o0 = k * CW;
      for (let q = 0; q < coils; q++) {
        for (let r = 0; r < W; r++) {
          const o = o0 + q * W + r;
          const zr = accR[o]!, zi = accI[o]!;
          accR[o] = 0;
          accI[o] = 0;
          if (hk === 0) continue;
          const wr = (zr * pr0 - zi * pi0) * hk, wi = (zr * pi0 + zi * pr0) * hk;
          addSegments(XB, p * NX + 2 * (r * coils + q) * L, wr, wi, Ck, k, L);
        }
      }
    }
  }
  };
}

// Hot loops of fastReadoutFrom live in small functions: V8 does not optimise
// a function that large, so a loop left in its body runs unoptimised.

/** n2[x] += Σ |XB|² over the used read columns a0 … a1−1 of a block (grids interleaved per position), rows 0 … rows − 1 (the others are zero). */
function addNorms(XB: Float64Array, a0: number, a1: number, colUsed: Uint8Array, Mv: number, NX: number, rows: number, n2: Float64Array): void {
  for (let a = a0; a < a1; a++) {
    if (!colUsed[a]) continue;
    const ob = 2 * (a - a0) * Mv * NX;
    for (let o = ob; o < ob + 2 * rows * NX; o += 2 * NX) {
      for (let x = 0; x < NX; x++) {
        const xr = XB[o + 2 * x]!, xi = XB[o + 2 * x + 1]!;
        n2[x] = n2[x]! + xr * xr + xi * xi;
      }
    }
  }
}

/** re/im[ob + j] += v[o + 2j], v[o + 2j + 1] for j < ns. */
function addLine(re: Float64Array, im: Float64Array, ob: number, v: Float64Array, o: number, ns: number): void {
  for (let j = 0; j < ns; j++) {
    re[ob + j] = re[ob + j]! + v[o + 2 * j]!;
    im[ob + j] = im[ob + j]! + v[o + 2 * j + 1]!;
  }
}

/** The distinct (Δf, R2) of the plan's classes in first-seen order (keyDf, keyR2), and each class's key (keyOf). */
function classKeys(plan: EnginePlan): { keyOf: Int32Array; keyDf: number[]; keyR2: number[] } {
  const { classDf, classR2 } = plan.rf, C = plan.classes;
  const keyIndex = new Map<string, number>();
  const keyOf = new Int32Array(C);
  const keyDf: number[] = [], keyR2: number[] = [];
  for (let c = 0; c < C; c++) {
    const s = `${classDf[c]}|${classR2[c]}`;
    let k = keyIndex.get(s);
    if (k === undefined) {
      k = keyDf.length;
      keyIndex.set(s, k);
      keyDf.push(classDf[c]!);
      keyR2.push(classR2[c]!);
    }
    keyOf[c] = k;
  }
  return { keyOf, keyDf, keyR2 };
}

/** The distinct (R2, Δf) keys of the classes, each key's weight, and the decay of each key at every sample (E; ey weighted). */
function timeKeys(plan: EnginePlan, G: Float64Array, R: number, mass: Float64Array, ns: number, dwell: number) {
  const C = plan.classes;
  const { keyOf, keyDf, keyR2 } = classKeys(plan);
  const keyW: number[] = keyDf.map(() => 0);
  for (let c = 0; c < C; c++) {
    const k = keyOf[c]!;
    let p2 = 0;
    for (let r = 0; r < R; r++) p2 += G[2 * (c * R + r)]! ** 2 + G[2 * (c * R + r) + 1]! ** 2;
    keyW[k] = keyW[k]! + mass[c]! * Math.sqrt(p2);
  }
  const K = keyDf.length;
  const E = scratchF64("E", 2 * ns * K), ey = scratchF64("ey", 2 * ns * K);
  for (let k = 0; k < K; k++) keyDecay(E, ey, 2 * k * ns, ns, dwell, keyR2[k]!, keyDf[k]!, keyW[k]!);
  return { keyOf, keyDf, keyR2, K, E, ey };
}

/** One key's decay exp(−t·R2)·exp(−i2π·Δf·t) at t = j·dwell into E[o …], times its weight w into ey[o …]. */
function keyDecay(E: Float64Array, ey: Float64Array, o0: number, ns: number, dwell: number, r2: number, df: number, w: number): void {
  for (let j = 0; j < ns; j++) {
    const t = j * dwell, e = Math.exp(-t * r2), th = -TWO_PI * df * t;
    const o = o0 + 2 * j;
    E[o] = e * Math.cos(th);
    E[o + 1] = e * Math.sin(th);
    ey[o] = E[o]! * w;
    ey[o + 1] = E[o + 1]! * w;
  }
}

/** Σ y[o + k]² for k < n in index order (a function of its own: optimised early, see removeComponent). */
function sumSquaresAt(y: Float64Array, o: number, n: number): number {
  let s = 0;
  for (let k = 0; k < n; k++) s += y[o + k]! ** 2;
  return s;
}

/** Σ v[j]² in index order. */
function sumSquares(v: Float64Array): number {
  let s = 0;
  for (let j = 0; j < v.length; j++) s += v[j]! * v[j]!;
  return s;
}

/** y[c·NA + k] = P[line_k·C + c]·mass[c] (interleaved complex), line outer: P is read along its rows. */
function lineValues(P: Float64Array, lines: number[], C: number, mass: Float64Array, y: Float64Array): void {
  const NA = lines.length;
  // LT lines at a time: each class's LT values are written together (one or two cache lines of y), not one per line
  const LT = 8;
  for (let k0 = 0; k0 < NA; k0 += LT) {
    const k1 = Math.min(NA, k0 + LT);
    for (let c = 0; c < C; c++) {
      const m = mass[c]!;
      for (let k = k0; k < k1; k++) {
        const o = 2 * (lines[k]! * C + c), t = 2 * (c * NA + k);
        y[t] = P[o]! * m;
        y[t + 1] = P[o + 1]! * m;
      }
    }
  }
}

/**
 * project(basis, Pl, NA, C) for Pl[c·NA + k] = P[line_k·C + c], read from P
 * along its rows (no transposed copy): each coefficient still sums its terms
 * in line order k = 0, 1, …, so the numbers are the same.
 */
export function projectLines(basis: Float64Array[], P: Float64Array, lines: number[], C: number, wasm = true): Float64Array {
  // on the SIMD kernel where it runs (the same numbers; basis-wasm.ts)
  const onKernel = basis.length > 0 && lines.length * C >= SWEEP_MIN ? projectOnKernel(basis, P, lines, C, wasm) : null;
  if (onKernel) return onKernel;
  const R = basis.length, NA = lines.length, coef = new Float64Array(2 * C * R), bk = new Float64Array(2 * R);
  for (let k = 0; k < NA; k++) {
    for (let r = 0; r < R; r++) {
      bk[2 * r] = basis[r]![2 * k]!;
      bk[2 * r + 1] = basis[r]![2 * k + 1]!;
    }
    addProjection(coef, P, 2 * lines[k]! * C, C, R, bk);
  }
  return coef;
}

/** coef[c·R + r] += conj(b_r)·P[o + c] for every class c and rank r (line k's terms; b_r at bk[2r]): a class's R coefficients side by side. */
function addProjection(coef: Float64Array, P: Float64Array, o: number, C: number, R: number, bk: Float64Array): void {
  for (let c = 0; c < C; c++) {
    const xr = P[o + 2 * c]!, xi = P[o + 2 * c + 1]!, t = 2 * c * R;
    for (let r = 0; r < R; r++) {
      const br = bk[2 * r]!, bi = bk[2 * r + 1]!;
      coef[t + 2 * r] = coef[t + 2 * r]! + (br * xr + bi * xi);
      coef[t + 2 * r + 1] = coef[t + 2 * r + 1]! + (br * xi - bi * xr);
    }
  }
}

/**
 * Folds columns c0 … c1−1 (whole columns, in column order) into a block of
 * folded read columns starting at aBase: grid position ((a mod Mu) − aBase, b mod Mv).
 */
export type ColumnFolder = (c0: number, c1: number, aBase: number, grids: Float64Array, track: SlotTrack | null) => void;

/** A small seeded generator (mulberry32, common practice) for the sample subset. */
export function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/**
 * A-posteriori error estimate: the direct sum over every isochromat, with the
 * exact per-class transverse state and exact phase and decay factors (no line
 * factor, no time segmentation, no FFT), on a seeded random subset of samples
 * — ESTIMATE_ROWS rows, ESTIMATE_SAMPLES / ESTIMATE_ROWS samples in each, stratified by distance from
 * the k-space centre (stratifiedPicks: the centre row and the echo sample always) —
 * against the fast result: ESTIMATE_SUBSET_MARGIN × the relative L2 error on the
 * subset, all coils (the margin covers the sampling of the subset).
 */
function estimate(
  plan: EnginePlan, iso: IsochromatSet, h: History, actN: number[], ky: Float64Array, kx0: number, dkx: number, ns: number, dwell: number,
  keyOf: Int32Array, keyDf: number[], keyR2: number[],
): EstimateFinish {
  const { uGrid, vGrid, iu, iv, m0, df, colStart } = iso;
  const rfClass = plan.rfClass;
  return estimateOver(plan, h, actN, ky, kx0, dkx, ns, dwell, keyOf, keyDf, keyR2, iso.count, (visit) => {
    for (let cc = 0; cc < iso.columns; cc++) {
      const i0 = colStart[cc]!, i1 = colStart[cc + 1]!;
      if (i1 <= i0) continue;
      visit(uGrid[iu[i0]!]!, vGrid[iv[i0]!]!, i1 - i0, rfClass.subarray(i0, i1), m0.subarray(i0, i1), df.subarray(i0, i1), i0);
    }
  });
}

/** Visits every column: its u and v (m), isochromat count n, and per isochromat the RF class, m0, Δf (Hz); i0 the first isochromat's index (for plan.sens), or the column's own sensitivities sens[2·(q·n + i)]. */
export type ColumnVisitor = (
  visit: (u: number, v: number, n: number, cls: Int32Array, m0: Float64Array, df: Float64Array, i0: number, sens?: Float64Array) => void,
  /** Adds a column's direct sums at the estimate's samples, colv[2·(q·S + s)] before the in-plane phase (a visitor that sums whole columns itself). */
  addSamples: (u: number, v: number, colv: Float64Array) => void,
  setup: EstimateSetup,
) => void;

/** The estimate's sample subset and exact per-class factors, for visitors that sum whole columns themselves. */
export interface EstimateSetup {
  /** Samples S, estimate rows NR, samples per row PJ (sample s lies in row ⌊s/PJ⌋). */
  S: number; NR: number; PJ: number;
  /** Pr[2·(c·NR + w)]: Σ over the readouts of row w of c_n·P_c(n), exact (no line factor). */
  Pr: Float64Array;
  /** dec[2·(k·S + s)]: exp(−j_s·Δt·(R2 + i2πΔf)) of key k, exact (no time segmentation). */
  dec: Float64Array;
  keyOf: Int32Array; keyDf: number[];
  /** Receiver filter: read gradient γ̄G (Hz/m) and sampled bandwidth (Hz), or null without the filter. */
  filter: { fRead: number; bw: number } | null;
  /** Use the WebAssembly SIMD kernels where available (the engine's `wasm` option). */
  wasm: boolean;
  /**
   * One coil: adds columns whose sums before the in-plane phase are fp × a table (see
   * {@link OneCoilTables}), regrouped per read position.
   */
  oneCoilTables?: OneCoilTables;
  /**
   * Any number of coils: for tables of `nw` rows of samples each (row c of table z at
   * tables[z][2·(c·S + s)]), a function that adds a column whose sums before the in-plane phase are,
   * per coil q, Σ_c g[q][c]·row c of table z (g interleaved at g[2·(q·nw + c)]; zero weights cost
   * nothing; or, given idx and k, the k weights g[2i] of entries idx[i] = q·nw + c alone): the same direct sum regrouped per read position (Σ over its columns of g·exp(−i2π ky·v)
   * per table, coil, row and estimate row, then × the table row and exp(−i2π kx·u)).
   */
  cellSums: (tables: readonly (Float64Array | null)[], nw: number) => (z: number, g: Float64Array, u: number, v: number, b: number, idx?: Int32Array, k?: number) => void;
}

/**
 * One coil's estimate sums regrouped per read position: a column whose sums before the in-plane
 * phase are fp × table `z` of `tables` (table[2s] per sample) adds fp·exp(−i2π ky·v) per estimate
 * row to its table's accumulator; when the read position u changes (columns come in read-position
 * order, as the cells give them), each touched table is added to the total as table ×
 * accumulator × exp(−i2π kx·u). The same direct sum in another order. A class rather than a
 * closure per run: its methods stay one call target across runs, so V8 keeps their optimised code.
 */
export class OneCoilTables {
  private u = NaN;
  private n = 0;
  private list: readonly Float64Array[] = [];
  private acc = new Float64Array(0);
  private seen = new Uint8Array(0);
  private touched = new Int32Array(0);
  constructor(private readonly NR: number, private readonly S: number, private readonly PJ: number, private readonly tot: Float64Array, private readonly phases: EstimatePhases) {}

  /** Adds fp × table z of `tables` at (u, v); b is v's index on its grid (one v per index). */
  add(z: number, tables: readonly Float64Array[], fp: number, u: number, v: number, b: number): void {
    if (u !== this.u) {
      this.flush();
      this.u = u;
    }
    if (tables !== this.list) {
      this.flush();
      this.list = tables;
      this.acc = new Float64Array(2 * this.NR * tables.length);
      this.seen = new Uint8Array(tables.length);
      this.touched = new Int32Array(tables.length);
    }
    if (this.seen[z] === 0) {
      this.seen[z] = 1;
      this.touched[this.n++] = z;
    }
    const NR = this.NR, acc = this.acc, ev = this.phases.rowAt(v, b), a = 2 * NR * z;
    for (let w = 0; w < NR; w++) {
      acc[a + 2 * w] = acc[a + 2 * w]! + fp * ev[2 * w]!;
      acc[a + 2 * w + 1] = acc[a + 2 * w + 1]! + fp * ev[2 * w + 1]!;
    }
  }

  /** Adds the touched tables of the current read position to the total. */
  flush(): void {
    if (this.n === 0) return;
    const { NR, S, PJ, tot, acc, list } = this, eu = this.phases.read(this.u);
    for (let i = 0; i < this.n; i++) {
      const z = this.touched[i]!, tab = list[z]!, a = 2 * NR * z;
      this.seen[z] = 0;
      for (let s = 0; s < S; s++) {
        const w = Math.floor(s / PJ);
        const ar = eu[2 * s]!, ai = eu[2 * s + 1]!, br = acc[a + 2 * w]!, bi = acc[a + 2 * w + 1]!;
        const er = ar * br - ai * bi, ei = ar * bi + ai * br, xr = tab[2 * s]!, xi = tab[2 * s + 1]!;
        tot[2 * s] = tot[2 * s]! + (xr * er - xi * ei);
        tot[2 * s + 1] = tot[2 * s + 1]! + (xr * ei + xi * er);
      }
      acc.fill(0, a, a + 2 * NR);
    }
    this.n = 0;
  }
}

/**
 * The estimate's in-plane phase factors, exp(−i2π(kx·u + ky·v)) = exp(−i2π kx·u)·exp(−i2π ky·v):
 * along read at its samples for the current read position (the last one kept: columns come in
 * read order), along phase at its rows per phase position, kept per grid index b of v (one v per
 * index: an array lookup) or, without an index, per value of v.
 */
class EstimatePhases {
  private lastU = NaN;
  private readonly eu: Float64Array;
  private readonly byIndex: (Float64Array | undefined)[] = [];
  private readonly byValue = new Map<number, Float64Array>();
  /** kx (1/m) of each estimate sample, ky (1/m) of each estimate row. */
  constructor(private readonly kx: Float64Array, private readonly kyRow: Float64Array) {
    this.eu = new Float64Array(2 * kx.length);
  }

  /** exp(−i2π kx_s·u) at the samples (interleaved; the same array each call). */
  read(u: number): Float64Array {
    const eu = this.eu;
    if (u !== this.lastU) {
      this.lastU = u;
      for (let s = 0; s < this.kx.length; s++) {
        const th = -TWO_PI * this.kx[s]! * u;
        eu[2 * s] = Math.cos(th);
        eu[2 * s + 1] = Math.sin(th);
      }
    }
    return eu;
  }

  /** exp(−i2π ky_w·v) at the rows, v at grid index b. */
  rowAt(v: number, b: number): Float64Array {
    return this.byIndex[b] ?? (this.byIndex[b] = this.make(v));
  }

  /** exp(−i2π ky_w·v) at the rows. */
  rowOf(v: number): Float64Array {
    let ev = this.byValue.get(v);
    if (!ev) {
      ev = this.make(v);
      this.byValue.set(v, ev);
    }
    return ev;
  }

  private make(v: number): Float64Array {
    const NR = this.kyRow.length, ev = new Float64Array(2 * NR);
    for (let w = 0; w < NR; w++) {
      const th = -TWO_PI * this.kyRow[w]! * v;
      ev[2 * w] = Math.cos(th);
      ev[2 * w + 1] = Math.sin(th);
    }
    return ev;
  }
}

/** acc[a + 2·(i·NR + w)] += g_i·ev_w for the n complex weights g_i (interleaved; zeros skipped) and the NR row phases ev. */
function addCellRows(acc: Float64Array, a: number, g: Float64Array, ev: Float64Array, n: number, NR: number): void {
  for (let i = 0; i < n; i++) {
    const gr = g[2 * i]!, gi = g[2 * i + 1]!, o = a + 2 * i * NR;
    if (gr === 0 && gi === 0) continue;
    for (let w = 0; w < NR; w++) {
      const er = ev[2 * w]!, ei = ev[2 * w + 1]!;
      acc[o + 2 * w] = acc[o + 2 * w]! + (gr * er - gi * ei);
      acc[o + 2 * w + 1] = acc[o + 2 * w + 1]! + (gr * ei + gi * er);
    }
  }
}

/** acc[a + 2·(idx[i]·NR + w)] += g_i·ev_w for the k complex weights g_i (interleaved) of entries idx[i], and the NR row phases ev. */
function addCellRowsAt(acc: Float64Array, a: number, g: Float64Array, idx: Int32Array, k: number, ev: Float64Array, NR: number): void {
  for (let i = 0; i < k; i++) {
    const gr = g[2 * i]!, gi = g[2 * i + 1]!, o = a + 2 * idx[i]! * NR;
    for (let w = 0; w < NR; w++) {
      const er = ev[2 * w]!, ei = ev[2 * w + 1]!;
      acc[o + 2 * w] = acc[o + 2 * w]! + (gr * er - gi * ei);
      acc[o + 2 * w + 1] = acc[o + 2 * w + 1]! + (gr * ei + gi * er);
    }
  }
}

/**
 * tot[2·(q·S + s)] += Σ_c y[2·(c·S + s)]·acc[a + q·2·nw·NR + 2·(c·NR + ⌊s/PJ⌋)]·eu[2s]: one table's
 * regrouped sums (per coil q and row c) brought to the estimate's samples.
 */
function addCellSamples(tot: Float64Array, acc: Float64Array, a: number, y: Float64Array, eu: Float64Array, coils: number, nw: number, S: number, PJ: number, NR: number): void {
  for (let q = 0; q < coils; q++) {
    for (let c = 0; c < nw; c++) {
      const b = a + 2 * NR * (q * nw + c), yc = 2 * c * S;
      let any = false;
      for (let x = b; x < b + 2 * NR; x++) any ||= acc[x] !== 0;
      if (!any) continue;
      for (let s = 0; s < S; s++) {
        const w = Math.floor(s / PJ);
        const ar = eu[2 * s]!, ai = eu[2 * s + 1]!, br = acc[b + 2 * w]!, bi = acc[b + 2 * w + 1]!;
        if (br === 0 && bi === 0) continue;
        const er = ar * br - ai * bi, ei = ar * bi + ai * br, xr = y[yc + 2 * s]!, xi = y[yc + 2 * s + 1]!;
        tot[2 * (q * S + s)] = tot[2 * (q * S + s)]! + (xr * er - xi * ei);
        tot[2 * (q * S + s) + 1] = tot[2 * (q * S + s) + 1]! + (xr * ei + xi * er);
      }
    }
  }
}

/** The estimate against the fast k-space, once its direct sums are made. */
export type EstimateFinish = (re: Float64Array, im: Float64Array) => { samples: number; seed: number; relL2: number };

/** The a-posteriori estimate over columns given by `columns` (see {@link estimate}): the direct sums now, the comparison with the fast k-space by the returned function. */
export function estimateOver(
  plan: EnginePlan, h: History, actN: number[], ky: Float64Array, kx0: number, dkx: number, ns: number, dwell: number,
  keyOf: Int32Array, keyDf: number[], keyR2: number[],
  count: number, columns: ColumnVisitor,
): EstimateFinish {
  const rnd = mulberry32(ESTIMATE_SEED);
  const C = plan.classes, coils = plan.coils, sens = plan.sens, K = keyDf.length;
  // rows (distinct, each with its readouts' ky) and samples j per row
  // rows stratified by |ky| and samples by |kx| (one from each stratum): the subset always holds the centre of
  // k-space, where most of the signal and often most of the error is, and its outer parts
  const kyOf = new Map<number, number>();
  actN.forEach((n, k) => kyOf.set(h.adcs[n]!.op.row, ky[k]!));
  const allRows = [...kyOf.keys()];
  const NR = Math.min(ESTIMATE_ROWS, allRows.length), PJ = Math.min(ESTIMATE_SAMPLES / ESTIMATE_ROWS, ns);
  const rows = stratifiedPicks(allRows, NR, (r) => Math.abs(kyOf.get(r)!), rnd);
  const S = NR * PJ, js: number[] = [], kyRow = new Float64Array(NR);
  const samplesJ = Array.from({ length: ns }, (_, j) => j);
  for (let w = 0; w < NR; w++) js.push(...stratifiedPicks(samplesJ, PJ, (j) => Math.abs(kx0 + j * dkx), rnd));
  // Pr[c·NR + w] = Σ_{readouts n of row w} c_n·P_c(n) (all readouts of a row share its ky)
  const Pr = new Float64Array(2 * C * NR);
  for (let w = 0; w < NR; w++) {
    for (let k = 0; k < actN.length; k++) {
      const n = actN[k]!, op = h.adcs[n]!.op;
      if (op.row !== rows[w]) continue;
      kyRow[w] = ky[k]!;
      for (let c = 0; c < C; c++) {
        const pr = h.P[2 * (n * C + c)]!, pi = h.P[2 * (n * C + c) + 1]!, o = 2 * (c * NR + w);
        Pr[o] = Pr[o]! + (pr * op.weightRe - pi * op.weightIm);
        Pr[o + 1] = Pr[o + 1]! + (pr * op.weightIm + pi * op.weightRe);
      }
    }
  }
  // decay per key and sample: exp(−j·Δt·(R2 + i2πΔf))
  const dec = new Float64Array(2 * K * S);
  for (let k = 0; k < K; k++) {
    for (let s = 0; s < S; s++) {
      const t = js[s]! * dwell, e = Math.exp(-t * keyR2[k]!), th = -TWO_PI * keyDf[k]! * t;
      dec[2 * (k * S + s)] = e * Math.cos(th);
      dec[2 * (k * S + s) + 1] = e * Math.sin(th);
    }
  }
  const filt = plan.receiverFilter;
  const a0 = h.adcs[actN[0]!]!.op;
  const tot = new Float64Array(2 * S * coils), col = new Float64Array(2 * S * coils);
  const CN = coils * NR;
  const accR = new Float64Array(K * CN), accI = new Float64Array(K * CN);
  const touched = new Int32Array(K), seen = new Uint8Array(K);
  // exp(−i2π(kx·u + ky·v)) per read position and per phase position
  const phases = new EstimatePhases(Float64Array.from(js, (j) => kx0 + j * dkx), kyRow);
  // one coil, columns of a table (setup.oneCoilTables)
  const oneCoilTables = coils === 1 ? new OneCoilTables(NR, S, PJ, tot, phases) : undefined;
  // columns of whole tables with sensitivities (setup.cellSums): per table, coil, through-slice term and row
  // Σ g·ev(v) over the columns of one read position, added as the term's samples × that × eu(u) when the
  // read position changes (and at the end)
  const cellFlushes: (() => void)[] = [];
  const cellSums = (tables: readonly (Float64Array | null)[], nw: number) => {
    const per = 2 * nw * NR, acc = new Float64Array(coils * per * tables.length), seen = new Uint8Array(tables.length), touched = new Int32Array(tables.length);
    let at = NaN, n = 0;
    const flush = () => {
      if (n === 0) return;
      const eu = phases.read(at);
      for (let i = 0; i < n; i++) {
        const z = touched[i]!, a = coils * per * z;
        seen[z] = 0;
        addCellSamples(tot, acc, a, tables[z]!, eu, coils, nw, S, PJ, NR);
        acc.fill(0, a, a + coils * per);
      }
      n = 0;
    };
    cellFlushes.push(flush);
    return (z: number, g: Float64Array, u: number, v: number, b: number, idx?: Int32Array, k = 0) => {
      if (u !== at) {
        flush();
        at = u;
      }
      if (seen[z] === 0) {
        seen[z] = 1;
        touched[n++] = z;
      }
      const ev = phases.rowAt(v, b);
      if (idx) addCellRowsAt(acc, coils * per * z, g, idx, k, ev, NR);
      else addCellRows(acc, coils * per * z, g, ev, coils * nw, NR);
    };
  };
  const addPhased = (u: number, v: number, colv: Float64Array) => {
    const eu = phases.read(u), ev = phases.rowOf(v);
    for (let s = 0; s < S; s++) {
      const w = Math.floor(s / PJ);
      const ar = eu[2 * s]!, ai = eu[2 * s + 1]!, br = ev[2 * w]!, bi = ev[2 * w + 1]!;
      const er = ar * br - ai * bi, ei = ar * bi + ai * br;
      for (let q = 0; q < coils; q++) {
        const o = 2 * (q * S + s), xr = colv[o]!, xi = colv[o + 1]!;
        tot[o] = tot[o]! + (xr * er - xi * ei);
        tot[o + 1] = tot[o + 1]! + (xr * ei + xi * er);
      }
    }
  };
  const setup: EstimateSetup = { S, NR, PJ, Pr, dec, keyOf, keyDf, filter: filt ? { fRead: a0.readHzPerMetre, bw: a0.sampledBandwidth } : null, wasm: plan.wasm, cellSums, ...(oneCoilTables ? { oneCoilTables } : {}) };
  columns((u, v, n, cls, m0, df, i0, sensCol) => {
    let nt = 0;
    for (let il = 0; il < n; il++) {
      const i = i0 + il;
      const c = cls[il]!, k = keyOf[c]!;
      const m = m0[il]! * (filt ? receiverFilter(a0.readHzPerMetre * u + df[il]!, a0.sampledBandwidth) : 1);
      if (seen[k] === 0) {
        seen[k] = 1;
        touched[nt++] = k;
      }
      for (let q = 0; q < coils; q++) {
        let wr = m, wi = 0;
        if (sensCol) {
          wr = m * sensCol[2 * (q * n + il)]!;
          wi = m * sensCol[2 * (q * n + il) + 1]!;
        } else if (sens) {
          wr = m * sens[2 * (q * count + i)]!;
          wi = m * sens[2 * (q * count + i) + 1]!;
        }
        const o = (k * coils + q) * NR;
        for (let w = 0; w < NR; w++) {
          const pr = Pr[2 * (c * NR + w)]!, pi = Pr[2 * (c * NR + w) + 1]!;
          accR[o + w] = accR[o + w]! + (wr * pr - wi * pi);
          accI[o + w] = accI[o + w]! + (wr * pi + wi * pr);
        }
      }
    }
    col.fill(0);
    for (let t = 0; t < nt; t++) {
      const k = touched[t]!;
      seen[k] = 0;
      for (let q = 0; q < coils; q++) {
        const o = (k * coils + q) * NR;
        for (let s = 0; s < S; s++) {
          const w = Math.floor(s / PJ), xr = accR[o + w]!, xi = accI[o + w]!;
          const dr = dec[2 * (k * S + s)]!, di = dec[2 * (k * S + s) + 1]!, oc = 2 * (q * S + s);
          col[oc] = col[oc]! + (xr * dr - xi * di);
          col[oc + 1] = col[oc + 1]! + (xr * di + xi * dr);
        }
        accR.fill(0, o, o + NR);
        accI.fill(0, o, o + NR);
      }
    }
    addPhased(u, v, col);
  }, addPhased, setup);
  return (re, im) => {
  oneCoilTables?.flush();
  for (const f of cellFlushes) f();
  let num = 0, den = 0;
  for (let q = 0; q < coils; q++) {
    for (let s = 0; s < S; s++) {
      const o = (q * plan.rows + rows[Math.floor(s / PJ)]!) * plan.read + js[s]!;
      const dr = tot[2 * (q * S + s)]!, di = tot[2 * (q * S + s) + 1]!;
      num += (re[o]! - dr) ** 2 + (im[o]! - di) ** 2;
      den += dr * dr + di * di;
    }
  }
  return { samples: S * coils, seed: ESTIMATE_SEED, relL2: den > 0 ? ESTIMATE_SUBSET_MARGIN * Math.sqrt(num / den) : 0 };
  };
}

// ---------------------------------------------------------------------------
// Choosing the operator: costs predicted from the plan before either runs.

/** Predicted costs of both operators (milliseconds on the calibration machine; only their ratio decides). */
export interface ReadoutCosts {
  /** Direct operator (the spoiled shortcut's readout): predicted ms, from directUnits × DIRECT_NS_PER_UNIT. */
  directMs: number;
  /** Fast operator: predicted ms, from fastUnits × FAST_NS_PER_UNIT; null where it does not apply. */
  fastMs: number | null;
  /** Work units of each (complex multiply-adds and their like; see predictReadoutCosts). */
  directUnits: number;
  fastUnits: number | null;
  /** Bounds used for the fast operator's line rank R and time segments L (the run reports the actual ones). */
  lineRankBound?: number;
  segmentsBound?: number;
  /** Readout groups (distinct read position, Δf, R2 per chunk) and slots (distinct column and group), summed over the chunks (from a sample of chunks). */
  groups: number;
  slots: number;
  model: string;
}

/**
 * Calibration (2026-12-02, this 2-core machine shared with other jobs, Node
 * 20, one thread, in-process after a warm-up; minimum of 3 runs, the time of
 * makePlan subtracted from both — it is common to both operators):
 *
 *   case (tolerance 1e-6)                 direct: units   ms   | fast: units ms   | measured best
 *   128² two-bottle demo, default quality    518.7 M     488  |  632 M     852   | direct
 *   128² two-bottle demo, preview quality     13.9 M      14  |  127 M      58   | direct
 *   32² two-bottle, B0 200 Hz/0.1 m along y   1.1 M       1.3 |   10 M       4.0 | direct
 *   64² the same, default quality             450.7 M     428  |  394 M     351   | fast
 *   64² torso gre-t1-3t, preview quality       29.4 M      38  |   71 M      62   | direct
 *   96² torso gre-t1-3t, default quality     4102.5 M    4449  | 1913 M    1179   | fast
 *
 * (units as the model below counts them now; "default quality": density 2,
 * 12 through-slice isochromats, T2′ spread 16; "preview": density 1, 3
 * through-slice, no T2′ spread). Direct: the recurrence term and the
 * per-slot, per-class and grouping terms (weight W_DIRECT.perTerm against 1)
 * fitted by non-negative least squares of the relative error; the geometric
 * mean of measured/predicted is then DIRECT_NS_PER_UNIT (within ±20 % on
 * every case). Fast: the four terms' weights W_FAST in ns, from the same
 * least squares (iso 6.6, classes 4.9) and from phase timers inside
 * fastReadout on the demo and the 96² torso (grid: allocating, first touch
 * and strided accumulation of the folded grids, ≈ 20–34 ns per complex
 * point under load; the least squares alone, 8.9, left the demo's fast time
 * at 0.4× its measure). The fast prediction is within 0.7–2.4× of the
 * measure (mostly high, which errs towards direct, the oracle), the direct
 * one within ±20 %, and the choice matches the
 * measured best on every case above. Timings on this machine vary 2–3× with
 * the other jobs; only the ratio of the two predictions decides.
 */
export const DIRECT_NS_PER_UNIT = 1.06;
/**
 * Re-calibrated after the fast operator was made to fold and transform per
 * block of read columns (grids in cache, hot loops optimisable): CPU time of
 * one thread, serial executor, cells streamed, minimum of 3 runs after a
 * warm-up (the 128² torso once), 2026-12-02 on the same shared machine:
 *
 *   case (tolerance 1e-6)                      fast: measured  predicted (×1) | direct: measured  predicted
 *   128² two-bottle demo, default quality          280 ms        531           |     491 ms        550
 *   128² two-bottle demo, preview quality           36 ms        123           |      14 ms         15
 *   128² torso gre-t1-3t, default quality          703 ms       1280           |    9407 ms       8898
 *   64² torso gre-t1-3t, density 1, 4 through      33 ms         56           |      57 ms         36
 *   128² disc gre-t1-3t, density 2, 16 through     25 ms        228           |      57 ms         45
 *
 * measured/predicted of the fast operator: 0.53, 0.29, 0.55, 0.59, 0.11; the
 * scale 0.55 (their median) puts the large cases within ±10 % and leaves the
 * small ones high (towards direct, the oracle). With it auto chooses the
 * measured best on the first four; the disc (fast 25 ms against direct 57 ms)
 * still goes to direct.
 *
 * Re-calibrated again (2026-12-03) after the SIMD kernels, the bounds capped
 * by the key and class counts (boundsFrom) and the grid term made per block
 * (the grids are no longer held whole, so their first touch is gone): both
 * operators measured in one process, alternating, medians of 7 (the 128²
 * torso 3), one thread, cells streamed; the host then ran ≈ 1.25× slower than
 * the calibration above, so only each case's ratio counts:
 *
 *   case (tolerance 1e-6)                      fast: measured  units  | direct: measured  units | fast/direct
 *   128² two-bottle demo, default quality          240 ms      255 M  |    1552 ms      519 M  |  0.15
 *   128² two-bottle demo, preview quality           36 ms       33 M  |      48 ms       14 M  |  0.75
 *   128² torso gre-t1-3t, default quality         1091 ms     1218 M  |   20398 ms     8394 M  |  0.05
 *   64² torso gre-t1-3t, density 1, 4 through      99 ms       52 M  |     123 ms       34 M  |  0.80
 *   128² disc gre-t1-3t, density 2, 16 through     52 ms       21 M  |     147 ms       43 M  |  0.36
 *   64² two-bottle demo, default quality          107 ms       72 M  |     291 ms       90 M  |  0.37
 *   32² two-bottle demo, density 1, 4 through       7.9 ms      2.2 M |     2.7 ms      0.5 M |  2.9
 *   32² two-bottle gre-t1-3t, the same              4.9 ms      1.8 M |     2.4 ms      0.3 M |  2.0
 *
 * ms per unit: direct 2.4–3.6 (median 3.0) with ≈ 1.5 ms more on the 32²
 * cases; fast 0.9–2.5 (median 1.1) with ≈ 3–6 ms more on the 32² cases (the
 * set-up of the factors, whatever the size). In the units of
 * DIRECT_NS_PER_UNIT: FAST_NS_PER_UNIT = 1.06 × 0.95 / 3.0 ≈ 0.33, and fixed
 * costs FAST_FIXED_MS ≈ 4 ms × 1.06 / 3.0 ≈ 1.4 and DIRECT_FIXED_MS ≈ 0.5.
 * With them auto chooses the measured best on all eight (the 32² cases go to
 * direct by 2×; the preview demo to fast by 0.8×).
 */
export const FAST_NS_PER_UNIT = 0.33;
/** Fixed costs of a run of each operator in the model's milliseconds (set-up whatever the size; see above). */
export const FAST_FIXED_MS = 1.4;
export const DIRECT_FIXED_MS = 0.5;
/** Fast-operator term weights (ns per unit; the FFT term's unit is n·log2(n) of a power-of-two transform, weight 1). */
const W_FAST = { iso: 6.6, grid: 20, classes: 4.85 };
/** Direct-operator weight of the per-slot, per-class and grouping terms against one step of the readout recurrence. */
const W_DIRECT = { perTerm: 7 };

/** Cost of a DFT of length n in n·log2(n) units: fft.js for powers of two, Bluestein (three transforms of length m ≥ 2n − 1 and three products) otherwise. */
function dftCost(n: number): number {
  if (n <= 1) return 1;
  if ((n & (n - 1)) === 0) return n * Math.log2(n);
  let m = 2;
  while (m < 2 * n - 1) m *= 2;
  return 2 * m * Math.log2(m) + 3 * m;
}

/** Work units per isochromat of the direct operator's one-off grouping (hashing each isochromat's group and slot pattern once per chunk). */
const GROUPING_UNITS = 30;
/**
 * Chunks sampled for the readout-group count (evenly spaced, deterministic): at most COST_SAMPLE_CHUNKS, and at most
 * one in COST_SAMPLE_EVERY (at least COST_SAMPLE_MIN), so that a small run does not spend a third of its
 * isochromats on its own prediction (the 128² demo: 13 of 104 chunks instead of 32).
 */
const COST_SAMPLE_CHUNKS = 32, COST_SAMPLE_EVERY = 8, COST_SAMPLE_MIN = 8;

const costCache = new WeakMap<EnginePlan, { tolerance: number; costs: ReadoutCosts }>();

/**
 * Predicts the cost of both readout operators from the plan and the
 * isochromats alone (no RF maps needed, nothing run), so "auto" can pick the
 * cheaper one. What dominates each:
 *
 * - Direct (spoiled shortcut, chunk.ts runChunkSpoiled): per chunk and active
 *   readout, one recurrence step per readout group, sample and coil (the
 *   group is the distinct (read index, Δf, R2) in the chunk; counted on up
 *   to COST_SAMPLE_CHUNKS evenly spaced chunks and scaled by isochromats);
 *   plus, weighted W_DIRECT.perTerm, one term per slot (column × group) and
 *   readout — per isochromat and coil with coil sensitivities —, the class
 *   updates per op (chunk classes × ops) and the one-off grouping of each
 *   isochromat (GROUPING_UNITS).
 * - Fast (ns per unit W_FAST): the isochromat work — one pass per line rank
 *   (count·coils·R), the folds of each column's (Δf, R2) keys into the grids
 *   ((columns + slots)·coils·R·L) and the a-posteriori estimate —; the grid
 *   work — per used read column and (rank, segment, coil) grid, its rows
 *   zeroed and their norms summed (min(rows, Mv)), and the strided
 *   accumulation of the phase-transformed lines (Mv + lines): R·L·coils·used
 *   columns·(min(rows, Mv) + Mv + lines); the grids are folded and
 *   transformed per block in cache, none held whole —; the FFTs
 *   (R·L·coils·used columns·DFT(Mv) + 2·coils·lines·L·(DFT(Mu) + ns), a
 *   Bluestein length costing its three power-of-two transforms); and the
 *   class work (class playback classes·ops, line factor 4·lines·classes·R,
 *   time factor ns·keys·L).
 *   R and L are not known before the run; they are bounded:
 *   L ≤ ⌈2·T·span(Δf) + T·span(R2)⌉ + ⌈log10(split/tolerance)⌉ (time–bandwidth
 *   product of the decay curves over the readout duration T, plus a term per
 *   decade of the tolerance; cf. Slepian 1978, Bell Syst. Tech. J. 57:1371,
 *   on the count of significant prolate functions ≈ 2WT + O(log 1/ε)) and
 *   R ≤ 1 + ⌈log10(split/tolerance)⌉ (steady state plus the transient's
 *   decades). Both were at or above the measured R and L on the calibration
 *   cases (measured R 3–8, L 7–13 at tolerance 1e-6); the a-posteriori
 *   estimate's retries (split 80, 800) are not counted.
 * A bound that is too high only makes "auto" choose the direct operator (the
 * oracle) more often.
 */
export function predictReadoutCosts(seq: Sequence, plan: EnginePlan, iso: IsochromatSet, tolerance: number, split = 8): ReadoutCosts {
  const { iu, iv } = iso, rfClass = plan.rfClass;
  return predictCosts(seq, plan, iso, (i0, i1, sink) => {
    for (let i = i0; i < i1; i++) sink.iso(iu[i]!, iv[i]!, rfClass[i]!);
  }, tolerance, split);
}

/**
 * The number of distinct non-negative whole numbers (below 2^53) added since
 * the last clear(): what a Set<number>'s size gives, without its per-entry
 * cost (open addressing, linear probing, multiplicative hashing; a clear is
 * a new generation, not a refill).
 */
export class DistinctCount {
  private keys = new Float64Array(1024);
  private gen = new Int32Array(1024);
  private g = 1;
  size = 0;

  clear(): void {
    this.size = 0;
    this.g++;
    if (this.g === 0x7fffffff) {
      this.gen.fill(0);
      this.g = 1;
    }
  }

  add(key: number): void {
    const mask = this.keys.length - 1;
    let h = (Math.imul((key % 4294967296) | 0, 0x9e3779b1) ^ Math.imul((key / 4294967296) | 0, 0x85ebca6b)) & mask;
    for (;;) {
      if (this.gen[h] !== this.g) {
        this.gen[h] = this.g;
        this.keys[h] = key;
        if (++this.size * 2 > this.keys.length) this.grow();
        return;
      }
      if (this.keys[h] === key) return;
      h = (h + 1) & mask;
    }
  }

  private grow(): void {
    const keys = this.keys, gen = this.gen, g = this.g;
    this.keys = new Float64Array(2 * keys.length);
    this.gen = new Int32Array(2 * keys.length);
    this.g = 1;
    this.size = 0;
    for (let i = 0; i < keys.length; i++) if (gen[i] === g) this.add(keys[i]!);
  }
}

/**
 * What the cost model counts of a sample chunk: its isochromats one by one
 * (grid indices a, b and RF class), or whole columns (one grid position
 * (a, b) each, no two columns of a chunk at the same position, with the
 * classes of its n isochromats).
 */
export interface CostSink {
  iso(a: number, b: number, cls: number): void;
  column(a: number, b: number, n: number, cls: Int32Array): void;
}

/**
 * predictReadoutCosts over any source: `visitChunk(i0, i1, sink)` gives the sink isochromats i0 … i1−1
 * (whole columns), one by one or by column. Per sample chunk it counts the distinct classes, (read
 * column, key) groups and (position, key) slots, as Sets of them would (by generation stamps, so an
 * isochromat costs a few array reads).
 */
export function predictCosts(
  seq: Sequence, plan: EnginePlan, iso: { count: number; columns: number; uGrid: Float64Array; vGrid: Float64Array },
  visitChunk: (i0: number, i1: number, sink: CostSink) => void, tolerance: number, split = 8,
  streamed = false,
): ReadoutCosts {
  const hit = costCache.get(plan);
  if (hit && hit.tolerance === tolerance) return hit.costs;
  const C = plan.classes, coils = plan.coils, count = iso.count;
  // (Δf, R2) keys of the classes
  const { keyOf, keyDf, keyR2 } = classKeys(plan);
  const spread = keySpread(keyDf, keyR2);
  const K = Math.max(1, keyDf.length);
  // readout groups and slots per chunk, from evenly spaced sample chunks, scaled by isochromats
  const nv = Math.max(1, iso.vGrid.length), nu = Math.max(1, iso.uGrid.length);
  const picks = Math.min(plan.chunks, COST_SAMPLE_CHUNKS, Math.max(COST_SAMPLE_MIN, Math.ceil(plan.chunks / COST_SAMPLE_EVERY)));
  let sg = 0, ss = 0, sn = 0, sc = 0;
  // distinct classes, (a, key) groups and (a, b, key) slots of the chunk: stamps (pick p + 1) per class and
  // group where they fit, else counted sets; per column its distinct keys (stamp: the column's number)
  const cStamp = new Int32Array(C), gStamp = nu * K <= 1 << 23 ? new Int32Array(nu * K) : null, kStamp = new Int32Array(K);
  const gset = new DistinctCount(), sset = new DistinctCount();
  let stamp = 0, colId = 0, nc = 0, ng = 0, nsl = 0;
  const classAndGroup = (a: number, cls: number): number => {
    if (cStamp[cls] !== stamp) {
      cStamp[cls] = stamp;
      nc++;
    }
    const k = keyOf[cls]!, g = a * K + k;
    if (gStamp) {
      if (gStamp[g] !== stamp) {
        gStamp[g] = stamp;
        ng++;
      }
    } else gset.add(g);
    return k;
  };
  const sink: CostSink = {
    iso: (a, b, cls) => {
      const k = classAndGroup(a, cls);
      sset.add((a * nv + b) * K + k);
    },
    column: (a, _b, n, cls) => {
      colId++;
      for (let i = 0; i < n; i++) {
        const k = classAndGroup(a, cls[i]!);
        if (kStamp[k] !== colId) {
          kStamp[k] = colId;
          nsl++;
        }
      }
    },
  };
  for (let p = 0; p < picks; p++) {
    const c = Math.floor(((p + 0.5) * plan.chunks) / picks);
    const i0 = plan.chunkStart[c]!, i1 = plan.chunkStart[c + 1]!;
    stamp = p + 1;
    nc = ng = nsl = 0;
    gset.clear();
    sset.clear();
    visitChunk(i0, i1, sink);
    sg += ng + gset.size;
    ss += nsl + sset.size;
    sc += nc;
    sn += i1 - i0;
  }
  const scale = sn > 0 ? count / sn : 0;
  const groups = sg * scale, slots = ss * scale, chunkClasses = sc * scale;
  // readouts: lines, samples, duration, read and phase DFT lengths (as fastReadout finds them)
  const adcs = seq.blocks.filter((b) => b.kind === "adc");
  const NA = adcs.length;
  const ns = NA > 0 ? (adcs[0] as { samples: number }).samples : 0;
  let T = 0;
  for (const b of adcs) if (b.kind === "adc") T = Math.max(T, b.samples * b.dwell);
  // weights relative to one step of the readout recurrence (profiled, see W_DIRECT)
  const directTerms = {
    recurrence: NA * groups * ns * coils,
    slots: W_DIRECT.perTerm * NA * (plan.sens ? count * coils : slots),
    classes: W_DIRECT.perTerm * chunkClasses * plan.ops.length,
    grouping: W_DIRECT.perTerm * count * GROUPING_UNITS,
  };
  const directUnits = Object.values(directTerms).reduce((x, y) => x + y, 0);
  const pre = fastPrecheck(plan);
  let costs: ReadoutCosts;
  if (pre !== null || NA === 0) {
    costs = { directMs: (directUnits * DIRECT_NS_PER_UNIT) / 1e6 + DIRECT_FIXED_MS, fastMs: null, directUnits, fastUnits: null, groups, slots, model: "fast operator does not apply" };
  } else {
    const { R, L } = boundsFrom(T, spread.df, spread.r2, tolerance, split, { keys: K, samples: ns, lines: NA, classes: C });
    const [Mu, Mv] = dftLengths(seq, iso);
    const usedCols = Math.min(Mu, iso.uGrid.length);
    // weights relative to one n·log2(n) unit of a power-of-two FFT (profiled, see W_FAST)
    // streamed from the cells (fast-stream.ts): no pass per isochromat and rank, no class hashing; a column
    // of one tissue costs one R·L fold (the estimate still visits every isochromat once per estimate row)
    const raw = {
      iso: streamed
        ? count * coils * ESTIMATE_ROWS + iso.columns * coils * R * L + slots * coils * ESTIMATE_SAMPLES + iso.columns * ESTIMATE_SAMPLES * 4
        : count * coils * (R + ESTIMATE_ROWS) + (iso.columns + slots) * coils * R * L + slots * coils * ESTIMATE_SAMPLES + iso.columns * ESTIMATE_SAMPLES * 4,
      grid: R * L * coils * usedCols * (Math.min(iso.vGrid.length, Mv) + Mv + NA),
      fft: R * L * coils * usedCols * dftCost(Mv) + 2 * coils * NA * L * (dftCost(Mu) + ns),
      classes: (streamed ? 0 : count) + C * plan.ops.length + 4 * NA * C * R + ns * K * L,
    };
    const terms = { iso: W_FAST.iso * raw.iso, grid: W_FAST.grid * raw.grid, fft: raw.fft, classes: W_FAST.classes * raw.classes };
    const fastUnits = Object.values(terms).reduce((x, y) => x + y, 0);
    costs = {
      directMs: (directUnits * DIRECT_NS_PER_UNIT) / 1e6 + DIRECT_FIXED_MS, fastMs: (fastUnits * FAST_NS_PER_UNIT) / 1e6 + FAST_FIXED_MS, directUnits, fastUnits,
      lineRankBound: R, segmentsBound: L, groups, slots,
      model: "direct: lines × readout groups × samples × coils (+ slots, classes, grouping); fast: isochromat passes and folds × R·L, R·L grids and their FFTs, class playback; R, L bounded from the tolerance and the (Δf, R2) spread (engine/fast.ts predictReadoutCosts)",
    };
  }
  costCache.set(plan, { tolerance, costs });
  return costs;
}

/**
 * The operator to run for a request: "fast" and "direct" as asked; "auto"
 * the one of lower predicted cost (direct where the fast one does not apply).
 * Depends on the plan and isochromats only, so it is the same for any number
 * of workers or shards.
 */
export function resolveReadout(seq: Sequence, plan: EnginePlan, iso: IsochromatSet, requested: ReadoutChoice, tolerance: number): { use: ReadoutOperator; costs?: ReadoutCosts } {
  if (requested !== "auto") return { use: requested };
  const costs = predictReadoutCosts(seq, plan, iso, tolerance);
  const use = costs.fastMs !== null && costs.fastMs < costs.directMs ? "fast" : "direct";
  return { use, costs };
}

/**
 * Ahead of a run the fast operator may take (called before its costs are
 * predicted): where it would share its phase step with the helper thread, a
 * memory reserve for the step's shared arrays (Z, the slots and the coils'
 * lines, at the cost model's rank and segment bounds) whose pages the helper
 * writes while this thread goes on (fast-phase.ts). Changes no number of the
 * run; if the direct operator runs instead, the reserve waits for a later run.
 */
export function prepareHelperMemory(seq: Sequence, plan: EnginePlan, iso: { uGrid: Float64Array; vGrid: Float64Array }, tolerance: number, threads: number, split = 8): void {
  if (threads < 2 || phaseHelper === null || fastPrecheck(plan) !== null) return;
  const { R, L } = readoutBounds(seq, plan, tolerance, split), coils = plan.coils;
  const NA = seq.blocks.reduce((n, b) => n + (b.kind === "adc" ? 1 : 0), 0);
  const [Mu, Mv] = dftLengths(seq, iso);
  const usedCols = Math.min(Mu, iso.uGrid.length);
  if (R * L * coils * Mv * usedCols < phaseMinWork) return;
  const NX = R * coils * L, blockCols = Math.max(1, Math.min(Mu, Math.floor(BLOCK_BYTES / (16 * Mv * NX))));
  const ns = (seq.blocks.find((b) => b.kind === "adc") as { samples: number } | undefined)?.samples ?? 0;
  const r = reservePhaseMemory(16 * NA * usedCols * coils * L + 8 * PHASE_SLOTS * 2 * blockCols * Mv * NX + 16 * coils * NA * ns);
  if (r === null) return;
  phaseHelper()?.touch?.(r.buf, r.ctrl);
}

/**
 * The cost model's bounds of the line rank R and the segments L: from the tolerance, the readout duration T
 * and the classes' (Δf, R2) spread; and never above the ranks of the matrices factored (the time factor has
 * one decay curve per (R2, Δf) key, so L ≤ keys and L ≤ samples; the line factor is lines × classes, so
 * R ≤ lines and R ≤ classes): one tissue without a spread is one segment.
 */
function boundsFrom(T: number, dfSpread: number, r2Spread: number, tolerance: number, split: number, size: { keys: number; samples: number; lines: number; classes: number }): { R: number; L: number } {
  const decades = Math.ceil(Math.log10(split / tolerance));
  return {
    L: Math.max(1, Math.min(MAX_SEGMENTS, Math.ceil(2 * T * dfSpread + T * r2Spread) + decades, size.keys, size.samples)),
    R: Math.max(1, Math.min(MAX_RANK, 1 + decades, size.lines, size.classes)),
  };
}

/** boundsFrom for a plan and sequence (as predictCosts finds them; no isochromat visited). */
function readoutBounds(seq: Sequence, plan: EnginePlan, tolerance: number, split: number): { R: number; L: number } {
  const { keyDf, keyR2 } = classKeys(plan);
  const spread = keySpread(keyDf, keyR2);
  let T = 0, lines = 0, samples = 0;
  for (const b of seq.blocks) {
    if (b.kind !== "adc") continue;
    T = Math.max(T, b.samples * b.dwell);
    if (lines++ === 0) samples = b.samples;
  }
  return boundsFrom(T, spread.df, spread.r2, tolerance, split, { keys: keyDf.length, samples, lines, classes: plan.classes });
}

/** Spread (greatest − least) of the keys' Δf (Hz) and R2 (1/s); −∞ for none. */
function keySpread(keyDf: number[], keyR2: number[]): { df: number; r2: number } {
  let fMin = Infinity, fMax = -Infinity, rMin = Infinity, rMax = -Infinity;
  for (let k = 0; k < keyDf.length; k++) {
    fMin = Math.min(fMin, keyDf[k]!);
    fMax = Math.max(fMax, keyDf[k]!);
    rMin = Math.min(rMin, keyR2[k]!);
    rMax = Math.max(rMax, keyR2[k]!);
  }
  return { df: fMax - fMin, r2: rMax - rMin };
}

/** The read and phase DFT lengths fastReadout will find (1/(Δk·grid step)), from the sequence's readouts; 1 where undefined. */
function dftLengths(seq: Sequence, iso: { uGrid: Float64Array; vGrid: Float64Array }): [number, number] {
  const { uGrid, vGrid } = iso;
  let acc: [number, number, number] = [0, 0, 0];
  let dkx = 0;
  const ky: number[] = [];
  for (const b of seq.blocks) {
    if (b.kind === "rf") acc = [0, 0, 0];
    else if (b.kind === "free") acc = [acc[0] + b.area[0], acc[1] + b.area[1], acc[2] + b.area[2]];
    else if (b.kind === "adc") {
      if (dkx === 0) dkx = GAMMA_BAR * b.grad[0] * b.dwell;
      ky.push(GAMMA_BAR * acc[1]);
      const T = b.samples * b.dwell;
      acc = [acc[0] + b.grad[0] * T, acc[1] + b.grad[1] * T, acc[2] + b.grad[2] * T];
    }
  }
  const Mu = uGrid.length > 1 && dkx !== 0 ? Math.max(1, Math.round(1 / (Math.abs(dkx) * (uGrid[1]! - uGrid[0]!)))) : 1;
  let Mv = 1;
  if (vGrid.length > 1 && ky.length > 1) {
    const dv = vGrid[1]! - vGrid[0]!;
    let step = Infinity;
    for (const k of ky) {
      const d = Math.abs(k - ky[0]!) * dv;
      if (d > 1e-12 && d < step) step = d;
    }
    if (Number.isFinite(step)) Mv = Math.max(1, Math.round(1 / step));
  }
  return [Math.min(Mu, 1 << 22), Math.min(Mv, 1 << 22)];
}
