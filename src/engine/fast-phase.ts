/**
 * The fast readout operator's phase-axis step (engine/fast.ts), on its own so
 * a helper thread can run it: for one block of folded read columns, the
 * phase-axis DFT of every listed grid, its sampled lines times c_n·A_r(n)
 * added into Z[q·L + l][a][n]. Blocks cover disjoint read columns a, so
 * blocks can run on any thread in any order: every element of Z is added to
 * by one block, in list order, whichever thread runs it (the same bits).
 *
 * A block's handing over (ParallelPhase) uses shared memory only: slots of
 * folded grids, a list of (grid, rank, coil, segment) entries and a control
 * array, with Atomics for the hand-offs (no message per block).
 */
import { FFTPlan } from "../recon/fft.js";
import { uniformAndLoops, type CoilArray } from "../dataset/coils.js";
import { projectThroughSlice, SliceProjector, throughSliceBasis } from "./slice-basis.js";

/** What every block's transform reads (the same for the whole run). */
export interface PhaseSetup {
  /** Phase DFT length, active lines, grids per position. */
  Mv: number; NA: number; NX: number; R: number; L: number; coils: number;
  /** Use the WebAssembly SIMD kernels where available (the engine's `wasm` option; the same bits either way). */
  wasm: boolean;
  /** Folded phase index of each active line. */
  mLine: Int32Array;
  /** AL[2·(k·R + r)]: c_n·exp(−i2π(ky_n − ky_ref)·v0)·A_r(n). */
  AL: Float64Array;
  /** Read columns of the folded grid holding any isochromat. */
  colUsed: Uint8Array;
  /** Rows of the folded grid a weight can fold into: 0 … rows − 1 (the others stay zero). */
  rows: number;
  /** Place of each used read column in Z (−1 for the unused), and the number of used columns. */
  zCol: Int32Array;
  zCols: number;
  /** Z[q·L + l] as one array, used read columns only: offset (q·L + l)·2·NA·zCols, element 2·(zCol[a]·NA + k). */
  Z: Float64Array;
  Mu: number;
}

/** The phase step's FFT plans of this thread, by length: kept for later runs (with the input area of their SIMD kernel). */
const phasePlans = new Map<number, FFTPlan>();

/** The transform of one block (one per thread: its FFT plan). */
export class PhaseTransform {
  private readonly dft: FFTPlan;
  constructor(private readonly s: PhaseSetup) {
    let plan = phasePlans.get(s.Mv);
    if (!plan) {
      plan = new FFTPlan(s.Mv);
      phasePlans.set(s.Mv, plan);
    }
    this.dft = plan;
  }

  /**
   * A zeroed block of grids (`doubles` numbers) in the memory of this
   * transform's SIMD kernel, or null (no WebAssembly SIMD, the `wasm` option
   * off, or a length that is not a power of two): blocks folded there get the
   * FFT's first step on the kernel too (FFTPlan.inputArea; the same bits).
   * Valid for this run.
   */
  inputBlock(doubles: number): Float64Array | null {
    this.own = this.s.wasm ? this.dft.inputArea(doubles) : null;
    return this.own;
  }

  /** The block of inputBlock (folded in the kernel's memory), if any. */
  private own: Float64Array | null = null;
  /**
   * For blocks outside the kernel's memory (a helper's slots, shared): one read column's grids are copied here
   * first (one contiguous copy), so that the FFT's first step runs on the kernel too (the same numbers as the
   * TypeScript first step, FFTPlan.forwardBatch). Made on first use: null without the kernel.
   */
  private area: Float64Array | null | undefined = undefined;

  /**
   * Grids list[4i] (x, r, q, l for i < nl) of the block XB (read columns
   * a0 … a1−1, XB[2·(((a − a0)·Mv + b)·NX + x)]): phase DFT per used read
   * column, the sampled lines times AL into Z.
   */
  run(XB: Float64Array, list: Int32Array, nl: number, a0: number, a1: number): void {
    if (nl === 0) return;
    const { Mv, NA, NX, R, L, mLine, AL, colUsed, Z, zCol, zCols, rows } = this.s;
    const dft = this.dft, zStride = 2 * NA * zCols;
    let src = XB;
    if (this.s.wasm && (this.own === null || XB.buffer !== this.own.buffer)) {
      // the area's rows ≥ `rows` stay +0 (zeroed when made, never written), as a block's
      if (this.area === undefined) this.area = dft.inputArea(2 * Mv * NX, BATCH);
      if (this.area) src = this.area;
    }
    for (let a = a0; a < a1; a++) {
      if (colUsed[a] === 0) continue;
      // each grid's line along the read column, read in place (stride NX; rows ≥ `rows` are +0, and no
      // value of a fold is −0: sums from +0) and transformed; grids next to each other (consecutive x in
      // the list, up to BATCH) together: one sweep down the column reads each row's cache line and page once
      // for all of them
      let base = 2 * (a - a0) * Mv * NX;
      if (src !== XB) {
        src.set(XB.subarray(base, base + 2 * rows * NX));
        base = 0;
      }
      for (let i = 0; i < nl; ) {
        const x0 = list[4 * i]!;
        let g = 1;
        while (g < BATCH && i + g < nl && list[4 * (i + g)]! === x0 + g) g++;
        const out = dft.forwardBatch(src, base + 2 * x0, 2, 2 * NX, g, rows, this.s.wasm);
        for (let j = 0; j < g; j++, i++) {
          const r = list[4 * i + 1]!, q = list[4 * i + 2]!, l = list[4 * i + 3]!;
          addLines(Z, (q * L + l) * zStride + 2 * zCol[a]! * NA, out, dft.batchOffset(j), mLine, AL, NA, R, r);
        }
      }
    }
  }
}

/**
 * Which grid positions of a helper's slot the fold has written (slots are not
 * zeroed after their transform any more: a fold that writes a position's
 * whole run stores it, and only what the block before left and this block
 * does not write is zeroed, ParallelPhase.seal): `written` for the block being
 * folded, `stale` for the block before it. Position pos is the run
 * XB[2·pos·NX … 2·(pos + 1)·NX).
 */
export interface SlotTrack {
  written: Uint8Array;
  stale: Uint8Array;
}

/** Before a fold adds into position pos of a tracked slot: its run zeroed if the block before left numbers there, and marked written. */
export function openPosition(t: SlotTrack, XB: Float64Array, pos: number, NX: number): void {
  if (t.written[pos] !== 0) return;
  if (t.stale[pos] !== 0) XB.fill(0, 2 * pos * NX, 2 * (pos + 1) * NX);
  t.written[pos] = 1;
}

/** Zeroes the rows a fold can write (0 … rows − 1) of the `cols` read columns of a block of grids (the others are never written). */
export function zeroBlock(XB: Float64Array, cols: number, Mv: number, NX: number, rows: number): void {
  if (rows >= Mv) {
    XB.fill(0, 0, 2 * cols * Mv * NX);
    return;
  }
  for (let c = 0; c < cols; c++) XB.fill(0, 2 * c * Mv * NX, 2 * (c * Mv + rows) * NX);
}

/** Grids transformed together by PhaseTransform.run (8: two cache lines of each row). */
const BATCH = 8;

function addLines(Z: Float64Array, zo: number, out: Float64Array, oo: number, mLine: Int32Array, AL: Float64Array, NA: number, R: number, r: number): void {
  for (let k = 0; k < NA; k++) {
    const m = oo + 2 * mLine[k]!, fr = out[m]!, fi = out[m + 1]!;
    const cr = AL[2 * (k * R + r)]!, ci = AL[2 * (k * R + r) + 1]!, o = zo + 2 * k;
    Z[o] = Z[o]! + (fr * cr - fi * ci);
    Z[o + 1] = Z[o + 1]! + (fr * ci + fi * cr);
  }
}

/** Lines gathered per sweep in readAxis (16: 256 bytes of each read column's run per visit). */
export const KT = 16;
/** Read-axis transforms made together at most (lines × segments of a group). */
const READ_BATCH = 256;

/**
 * Line k of part p of `parts` (p = 0 … parts): the read step's jobs split a coil's NA lines at whole groups of
 * readAxis (lines are transformed independently, so a split changes no number).
 */
export function readPartStart(p: number, parts: number, NA: number, L: number): number {
  if (p >= parts) return NA;
  const g = readGroup(L) / L;
  return Math.min(NA, Math.ceil((p * NA) / parts / g) * g);
}

/** Read-step jobs wanted at least (whole coils or parts of one): a few per thread, so a late helper still gets its share. */
const READ_JOBS = 4;

/** Transforms of one group of readAxis: the lines of a group (KT, fewer with many segments) × the L segments. */
function readGroup(L: number): number {
  return Math.max(1, Math.min(KT, Math.floor(READ_BATCH / L))) * L;
}

/** The read step's FFT plans of this thread, by length: kept for later runs (with the input area of their SIMD kernel). */
const readPlans = new Map<number, FFTPlan>();

/**
 * This thread's read-axis plan of length Mu and readAxis' gather scratch
 * zt (2·Mu numbers per transform of a group, zeroed): in the plan's kernel memory where
 * WebAssembly SIMD runs and `wasm` allows (the first step there too, the same
 * bits), else from `fallback`. For one run at a time on a thread.
 */
export function readStep(Mu: number, L: number, wasm: boolean, fallback: (n: number) => Float64Array): { dft: FFTPlan; zt: Float64Array } {
  let dft = readPlans.get(Mu);
  if (!dft) {
    dft = new FFTPlan(Mu);
    readPlans.set(Mu, dft);
  }
  const n = 2 * readGroup(L) * Mu;
  return { dft, zt: (wasm ? dft.inputArea(n, READ_BATCH) : null) ?? fallback(n) };
}

/**
 * Read-axis DFT of every line of one coil, times B_l(j), summed over the
 * segments l in order into out[k][j] (interleaved): Zq[l] is [read column a][line k];
 * each is turned to [line][read column] first so the transforms read contiguous rows.
 * KT lines at a time, every segment's lines of the group transformed together
 * (input g = l·nk + t, element a at zt[2·(a·cap + g)], cap the group's most
 * transforms; zt holds 2·cap·Mu numbers, readStep), then
 * each output sample summed over l in order (the same additions, one store).
 * zt is +0 at the unused read columns (never written; no value of Z is −0: sums from +0); Zq[l] holds the used read columns usedA[i] (ascending) at i.
 */
export function readAxis(Zq: Float64Array[], NA: number, Mu: number, ns: number, BL: Float64Array, colIdx: Int32Array, dft: FFTPlan, zt: Float64Array, out: Float64Array, usedA: Int32Array, wasm = true, kStart = 0, kEnd = NA): void {
  const L = Zq.length, nzA = usedA.length > 0 ? usedA[usedA.length - 1]! + 1 : 0;
  // at most READ_BATCH transforms at once (many segments: fewer lines per group)
  const cap = readGroup(L);
  out.fill(0, 2 * kStart * ns, 2 * kEnd * ns);
  for (let k0 = kStart; k0 < kEnd; k0 += cap / L) {
    const nk = Math.min(cap / L, kEnd - k0);
    // one sweep down the read columns per segment reads each cache line of z once; zt holds the group's
    // transforms side by side (transform g's element a at 2·(a·cap + g)), so the first step's sweep down the
    // elements reads neighbours
    for (let l = 0; l < L; l++) gatherLines(Zq[l]!, zt, l * nk, cap, usedA, NA, k0, nk);
    const res = dft.forwardBatch(zt, 0, 2, 2 * cap, nk * L, nzA, wasm);
    const base = dft.batchOffset(0);
    for (let t = 0; t < nk; t++) readLine(out, 2 * (k0 + t) * ns, res, base + 2 * Mu * t, 2 * Mu * nk, colIdx, BL, ns, L);
  }
}

/** Transform g0 + t of zt ← line k0 + t of z at the used read columns (z: [used column i][line k]; zt: element a of transform g at 2·(a·cap + g)). */
function gatherLines(z: Float64Array, zt: Float64Array, g0: number, cap: number, usedA: Int32Array, NA: number, k0: number, nk: number): void {
  for (let i = 0; i < usedA.length; i++) {
    const src = 2 * (i * NA + k0), d = 2 * (usedA[i]! * cap + g0);
    for (let t = 0; t < 2 * nk; t++) zt[d + t] = z[src + t]!;
  }
}

/** out[o + 2j] += Σ_l res[r0 + l·rl + 2·colIdx[j]]·B_l(j), the segments added in order l = 0, 1, …. */
function readLine(out: Float64Array, o: number, res: Float64Array, r0: number, rl: number, colIdx: Int32Array, BL: Float64Array, ns: number, L: number): void {
  for (let j = 0; j < ns; j++) {
    let vr = out[o + 2 * j]!, vi = out[o + 2 * j + 1]!;
    const c = r0 + 2 * colIdx[j]!, b = 2 * j * L;
    for (let l = 0; l < L; l++) {
      const cj = c + l * rl, fr = res[cj]!, fi = res[cj + 1]!;
      const br = BL[b + 2 * l]!, bi = BL[b + 2 * l + 1]!;
      vr = vr + (fr * br - fi * bi);
      vi = vi + (fr * bi + fi * br);
    }
    out[o + 2 * j] = vr;
    out[o + 2 * j + 1] = vi;
  }
}

// ---------------------------------------------------------------------------
// Hand-off to a helper thread through shared memory.

/** Control words (HELPER_WAITS, MAIN_WAITS: 1 while that thread sleeps in Atomics.wait, so a notify is sent only then). */
const GEN = 0, PROGRESS = 1, END = 2, LIST_LEN = 3, HELPER_WAITS = 4, MAIN_WAITS = 5, FAILED = 6, SLOT0 = 8;
/** Sensitivity jobs: after the grid slots, per job (state, columns). */
const SENS_JOBS = 4;
const S_FREE = 0, S_REQUESTED = 1, S_BUSY = 2, S_DONE = 3;

/** Coil sensitivities a helper evaluates ahead of the fold: the uniform coil and loops (dataset/coils.ts uniformAndLoops) at the cell centres of listed columns. */
export interface SensShared {
  loops: CoilArray;
  /** Use the WebAssembly SIMD kernel where available (the engine's `wasm` option). */
  wasm: boolean;
  coils: number;
  uGrid: Float64Array; vGrid: Float64Array; wGrid: Float64Array;
  axes: { read: number[]; phase: number[]; slice: number[] };
  colA: SharedArrayBuffer; colB: SharedArrayBuffer;
  /**
   * Per job: the columns (Int32), and per column (4·coils·nw numbers) their sensitivities (2·coils·nw, as
   * CellStream.sensOf lays them out) and then those sensitivities' through-slice moments (2·coils·nw, as
   * slice-basis.ts projectThroughSlice makes them), so the main thread's fold need not make them.
   */
  cols: SharedArrayBuffer[]; out: SharedArrayBuffer[];
}

/** Columns whose sensitivities evalSens evaluates in one call (their cells' centres together: one batch per loop instead of one per column). */
const SENS_CHUNK = 16;

/** The sensitivities and their through-slice moments of columns cols[0 … n) into out (per column 4·coils·nw numbers, see SensShared.out), as CellStream.sensOf and the fold make them. */
function evalSens(sh: SensShared, colA: Int32Array, colB: Int32Array, cols: Int32Array, n: number, out: Float64Array, px: Float64Array, py: Float64Array, pz: Float64Array, one: Float64Array, psi: Float64Array, mom: Float64Array, proj: SliceProjector | null): void {
  const { uGrid, vGrid, wGrid, axes } = sh, nw = wGrid.length, coils = sh.coils, half = 2 * coils * nw, per = 2 * half;
  // the moments of every column at once on the SIMD kernel where it runs (the same bits as projectThroughSlice)
  const pm = proj ? proj.reserve(n * coils) : null, sAt = proj ? proj.sAt() : 0;
  for (let i0 = 0; i0 < n; i0 += SENS_CHUNK) {
    // the cell centres of up to SENS_CHUNK columns, evaluated together (each point's numbers as alone)
    const k = Math.min(SENS_CHUNK, n - i0), count = k * nw;
    for (let j = 0; j < k; j++) {
      const col = cols[i0 + j]!, u = uGrid[colA[col]!]!, v = vGrid[colB[col]!]!;
      for (let c = 0; c < nw; c++) {
        const w = wGrid[c]!;
        px[j * nw + c] = axes.read[0]! * u + axes.phase[0]! * v + axes.slice[0]! * w;
        py[j * nw + c] = axes.read[1]! * u + axes.phase[1]! * v + axes.slice[1]! * w;
        pz[j * nw + c] = axes.read[2]! * u + axes.phase[2]! * v + axes.slice[2]! * w;
      }
    }
    uniformAndLoops(sh.loops, px, py, pz, count, one);
    for (let j = 0; j < k; j++) {
      const i = i0 + j, o = i * per;
      // coil q's nw values of column j at one[2·(q·count + j·nw) …], laid out per column as sensOf does (2·(q·nw + c)),
      // and for the projector (no view made per column: this runs for every column)
      for (let q = 0; q < coils; q++) {
        const from = 2 * (q * count + j * nw), to = o + 2 * q * nw, pt = sAt + i * half + 2 * q * nw;
        for (let x = 0; x < 2 * nw; x++) {
          const val = one[from + x]!;
          out[to + x] = val;
          if (pm) pm[pt + x] = val;
        }
      }
      if (!pm) {
        projectThroughSlice(psi, out.subarray(o, o + half), coils, nw, mom);
        out.set(mom, o + half);
      }
    }
  }
  if (pm) {
    proj!.run(n * coils);
    const m0 = proj!.momAt();
    for (let i = 0; i < n; i++) out.set(pm.subarray(m0 + i * half, m0 + (i + 1) * half), i * per + half);
  }
}
/** Slot states. */
const FREE = 0, READY = 1, BUSY_HELPER = 2, BUSY_MAIN = 3, FILLING = 4;
/** Slots of folded grids (one being transformed by the helper, the others ready or free). */
export const PHASE_SLOTS = 4;

/** The shared buffers of one run (posted to the helper once). */
export interface PhaseShared {
  setup: Omit<PhaseSetup, "Z" | "colUsed">;
  /** Z (zLen numbers from the start) and then the PHASE_SLOTS slots of slotLen numbers each. */
  mem: SharedArrayBuffer;
  zLen: number;
  colUsed: SharedArrayBuffer;
  ctrl: SharedArrayBuffer;
  list: SharedArrayBuffer;
  slotLen: number;
  sens?: SensShared;
  /** The last step, the read axis of every coil (readAxis), shared too: its factors, and each coil's lines (linesLen numbers) after the slots in `mem`. */
  read?: ReadShared;
}

/** What the read axis of a coil needs (see readAxis), in shared memory. */
export interface ReadShared {
  BL: SharedArrayBuffer; colIdx: SharedArrayBuffer; usedA: SharedArrayBuffer;
  ns: number; linesLen: number;
  /** Jobs per coil: its lines in this many parts (readPartStart). */
  parts: number;
}

function ctrlLayout(ctrl: Int32Array, s: number) {
  return { state: SLOT0 + 3 * s, a0: SLOT0 + 3 * s + 1, a1: SLOT0 + 3 * s + 2 };
}

/** Control words of sensitivity job j: state, number of columns. */
function sensLayout(j: number) {
  const b = SLOT0 + 3 * PHASE_SLOTS + 2 * j;
  return { state: b, n: b + 1 };
}
/**
 * Control words of the read step, per round (one coil's run has two: the rank-0 lines that set the budget of
 * the skipped pairs, then every kept pair's; several coils have one): started (1), next job to claim, jobs done.
 */
const READ_ROUNDS = 2, READ_BASE = SLOT0 + 3 * PHASE_SLOTS + 2 * SENS_JOBS, CTRL_WORDS = READ_BASE + 3 * READ_ROUNDS;
function readLayout(round: number) {
  const b = READ_BASE + 3 * round;
  return { go: b, next: b + 1, done: b + 2 };
}

/** One thread's means for the read step: its FFT plan and gather scratch, views of Z and of each coil's lines. */
class ReadViews {
  private readonly dft: FFTPlan;
  private readonly zt: Float64Array;
  private readonly BL: Float64Array;
  private readonly colIdx: Int32Array;
  private readonly usedA: Int32Array;
  readonly lines: Float64Array[];
  constructor(private readonly setup: Omit<PhaseSetup, "Z" | "colUsed">, private readonly Z: Float64Array, mem: SharedArrayBuffer, zLen: number, slotLen: number, private readonly rd: ReadShared) {
    const read = readStep(setup.Mu, setup.L, setup.wasm, (n) => new Float64Array(n));
    this.dft = read.dft;
    this.zt = read.zt;
    this.BL = new Float64Array(rd.BL);
    this.colIdx = new Int32Array(rd.colIdx);
    this.usedA = new Int32Array(rd.usedA);
    const at = zLen + PHASE_SLOTS * slotLen;
    this.lines = Array.from({ length: setup.coils }, (_, q) => new Float64Array(mem, 8 * (at + q * rd.linesLen), rd.linesLen));
  }

  /** Job j: lines of part j mod parts of coil ⌊j / parts⌋ (readAxis of its segments' Z over those lines). */
  run(j: number): void {
    const { NA, Mu, L, zCols } = this.setup, zStride = 2 * NA * zCols, parts = this.rd.parts;
    const q = Math.floor(j / parts), p = j - q * parts;
    const Zq = Array.from({ length: L }, (_, l) => this.Z.subarray((q * L + l) * zStride, (q * L + l + 1) * zStride));
    // zt came zeroed (readStep) and readAxis writes only the used read columns, the same for every job of the run
    readAxis(Zq, NA, Mu, this.rd.ns, this.BL, this.colIdx, this.dft, this.zt, this.lines[q]!, this.usedA, this.setup.wasm, readPartStart(p, parts, NA, L), readPartStart(p + 1, parts, NA, L));
  }

  get jobs(): number {
    return this.setup.coils * this.rd.parts;
  }
}

/** Claims and runs jobs of every started read round until none is left; false if it ran none. */
function runReads(ctrl: Int32Array, rv: ReadViews): boolean {
  let did = false;
  const jobs = rv.jobs;
  for (let r = 0; r < READ_ROUNDS; r++) {
    const c = readLayout(r);
    if (Atomics.load(ctrl, c.go) !== 1) continue;
    for (let j = Atomics.add(ctrl, c.next, 1); j < jobs; j = Atomics.add(ctrl, c.next, 1)) {
      rv.run(j);
      Atomics.add(ctrl, c.done, 1);
      did = true;
    }
  }
  return did;
}

/** Evaluates a requested sensitivity job if there is one (claimed by CAS); false if none. */
function runSensJob(ctrl: Int32Array, sh: SensShared, views: SensViews, busy: number): boolean {
  for (let j = 0; j < SENS_JOBS; j++) {
    const c = sensLayout(j);
    if (Atomics.compareExchange(ctrl, c.state, S_REQUESTED, busy) !== S_REQUESTED) continue;
    evalSens(sh, views.colA, views.colB, views.cols[j]!, Atomics.load(ctrl, c.n), views.out[j]!, views.px, views.py, views.pz, views.one, views.psi, views.mom, views.proj);
    Atomics.store(ctrl, c.state, S_DONE);
    return true;
  }
  return false;
}

interface SensViews { colA: Int32Array; colB: Int32Array; cols: Int32Array[]; out: Float64Array[]; px: Float64Array; py: Float64Array; pz: Float64Array; one: Float64Array; psi: Float64Array; mom: Float64Array; proj: SliceProjector | null }
function sensViews(sh: SensShared): SensViews {
  const nw = sh.wGrid.length, psi = throughSliceBasis(sh.wGrid);
  return {
    colA: new Int32Array(sh.colA), colB: new Int32Array(sh.colB), cols: sh.cols.map((b) => new Int32Array(b)), out: sh.out.map((b) => new Float64Array(b)),
    px: new Float64Array(SENS_CHUNK * nw), py: new Float64Array(SENS_CHUNK * nw), pz: new Float64Array(SENS_CHUNK * nw), one: new Float64Array(2 * sh.coils * SENS_CHUNK * nw),
    psi, mom: new Float64Array(2 * sh.coils * nw), proj: SliceProjector.make(psi, nw, sh.wasm),
  };
}

/** The helper's side: transforms ready slots until the run ends (runs synchronously on the helper thread); a failure is flagged for the main thread, which then stops the run. */
export function phaseHelperLoop(sh: PhaseShared): void {
  const ctrl = new Int32Array(sh.ctrl);
  try {
    helperLoop(sh, ctrl);
  } catch (e) {
    Atomics.store(ctrl, FAILED, 1);
    Atomics.add(ctrl, PROGRESS, 1);
    Atomics.notify(ctrl, PROGRESS);
    throw e;
  }
}

function helperLoop(sh: PhaseShared, ctrl: Int32Array): void {
  const list = new Int32Array(sh.list);
  const slots = slotViews(sh.mem, sh.zLen, sh.slotLen);
  const t = new PhaseTransform({ ...sh.setup, Z: new Float64Array(sh.mem, 0, sh.zLen), colUsed: new Uint8Array(sh.colUsed) });
  const sv = sh.sens ? sensViews(sh.sens) : null;
  const rv = sh.read ? new ReadViews(sh.setup, new Float64Array(sh.mem, 0, sh.zLen), sh.mem, sh.zLen, sh.slotLen, sh.read) : null;
  for (;;) {
    const gen = Atomics.load(ctrl, GEN);
    if (Atomics.load(ctrl, END) === 1) return;
    let did = false;
    // sensitivities first: the main thread's fold waits for them
    while (sh.sens && sv && runSensJob(ctrl, sh.sens, sv, S_BUSY)) {
      did = true;
      Atomics.add(ctrl, PROGRESS, 1);
      if (Atomics.load(ctrl, MAIN_WAITS) === 1) Atomics.notify(ctrl, PROGRESS);
    }
    for (let s = 0; s < slots.length; s++) {
      const c = ctrlLayout(ctrl, s);
      if (Atomics.compareExchange(ctrl, c.state, READY, BUSY_HELPER) !== READY) continue;
      const a0 = Atomics.load(ctrl, c.a0), a1 = Atomics.load(ctrl, c.a1);
      // the slot is not zeroed: the main thread's fold tracks what it writes (SlotTrack)
      t.run(slots[s]!, list, Atomics.load(ctrl, LIST_LEN), a0, a1);
      Atomics.store(ctrl, c.state, FREE);
      Atomics.add(ctrl, PROGRESS, 1);
      if (Atomics.load(ctrl, MAIN_WAITS) === 1) Atomics.notify(ctrl, PROGRESS);
      did = true;
    }
    if (rv && runReads(ctrl, rv)) {
      did = true;
      Atomics.add(ctrl, PROGRESS, 1);
      if (Atomics.load(ctrl, MAIN_WAITS) === 1) Atomics.notify(ctrl, PROGRESS);
    }
    if (!did) {
      Atomics.store(ctrl, HELPER_WAITS, 1);
      Atomics.wait(ctrl, GEN, gen);
      Atomics.store(ctrl, HELPER_WAITS, 0);
    }
  }
}

/**
 * The main thread's side: blocks are handed to free slots; when none is free
 * the main thread transforms a ready one itself (so the work is shared
 * whatever the helper's speed, and the run finishes even if the helper never
 * starts).
 */
export class ParallelPhase {
  readonly shared: PhaseShared;
  readonly Z: Float64Array;
  private readonly ctrl: Int32Array;
  private readonly list: Int32Array;
  private readonly slots: Float64Array[];
  private readonly own: PhaseTransform;
  private nl = 0;

  private sensViews: SensViews | null = null;

  private readonly readViews: ReadViews | null = null;

  /** Per slot, the positions its fold wrote and those the block before left. */
  private tracks: SlotTrack[];

  constructor(
    setup: Omit<PhaseSetup, "Z" | "colUsed">, colUsed: Uint8Array, maxList: number, slotLen: number, sens?: Omit<SensShared, "cols" | "out"> & { maxCols: number },
    read?: { BL: Float64Array; colIdx: Int32Array; usedA: Int32Array; ns: number },
  ) {
    const zLen = 2 * setup.NA * setup.zCols * setup.coils * setup.L;
    const linesLen = read ? 2 * setup.NA * read.ns : 0;
    const mem = claimMemory(8 * (zLen + PHASE_SLOTS * slotLen + setup.coils * linesLen));
    const cu = new SharedArrayBuffer(colUsed.length);
    new Uint8Array(cu).set(colUsed);
    const ctrl = new SharedArrayBuffer(4 * CTRL_WORDS);
    const list = new SharedArrayBuffer(4 * 4 * Math.max(1, maxList));
    this.shared = { setup, mem, zLen, colUsed: cu, ctrl, list, slotLen };
    if (sens) {
      const { maxCols, ...rest } = sens;
      const nw = sens.wGrid.length;
      this.shared.sens = {
        ...rest,
        cols: Array.from({ length: SENS_JOBS }, () => new SharedArrayBuffer(4 * Math.max(1, maxCols))),
        out: Array.from({ length: SENS_JOBS }, () => new SharedArrayBuffer(8 * 4 * sens.coils * nw * Math.max(1, maxCols))),
      };
      this.sensViews = sensViews(this.shared.sens);
    }
    this.Z = new Float64Array(mem, 0, zLen);
    if (read) {
      const share = (a: Float64Array | Int32Array) => {
        const b = new SharedArrayBuffer(a.byteLength);
        new Uint8Array(b).set(new Uint8Array(a.buffer, a.byteOffset, a.byteLength));
        return b;
      };
      // jobs of whole coils where there are several; one coil's lines in parts, so both threads share them
      const parts = Math.max(1, Math.ceil(READ_JOBS / setup.coils));
      this.shared.read = { BL: share(read.BL), colIdx: share(read.colIdx), usedA: share(read.usedA), ns: read.ns, linesLen, parts };
      this.readViews = new ReadViews(setup, this.Z, mem, zLen, slotLen, this.shared.read);
    }
    this.ctrl = new Int32Array(ctrl);
    this.list = new Int32Array(list);
    this.slots = slotViews(mem, zLen, slotLen);
    const positions = Math.floor(slotLen / (2 * setup.NX));
    this.tracks = this.slots.map(() => ({ written: new Uint8Array(positions), stale: new Uint8Array(positions) }));
    this.own = new PhaseTransform({ ...setup, Z: this.Z, colUsed: new Uint8Array(cu) });
  }

  /** The entries of the blocks that follow (call with no block outstanding: after drain()). */
  setList(list: Int32Array, nl: number): void {
    this.list.set(list.subarray(0, 4 * nl));
    this.nl = nl;
    Atomics.store(this.ctrl, LIST_LEN, nl);
  }

  /** Asks for the sensitivities of columns cols[0 … n) (n ≤ maxCols); returns the job, or −1 when every job is taken. */
  requestSens(cols: ArrayLike<number>, n: number): number {
    const v = this.sensViews;
    if (!v) return -1;
    for (let j = 0; j < SENS_JOBS; j++) {
      const c = sensLayout(j);
      if (Atomics.load(this.ctrl, c.state) !== S_FREE) continue;
      const dst = v.cols[j]!;
      for (let i = 0; i < n; i++) dst[i] = cols[i]!;
      Atomics.store(this.ctrl, c.n, n);
      Atomics.store(this.ctrl, c.state, S_REQUESTED);
      Atomics.add(this.ctrl, GEN, 1);
      if (Atomics.load(this.ctrl, HELPER_WAITS) === 1) Atomics.notify(this.ctrl, GEN);
      return j;
    }
    return -1;
  }

  /** The sensitivities of job j once evaluated (here, if the helper has not started it). */
  takeSens(j: number): Float64Array {
    const v = this.sensViews!, c = sensLayout(j), sh = this.shared.sens!;
    if (Atomics.compareExchange(this.ctrl, c.state, S_REQUESTED, S_BUSY) === S_REQUESTED) {
      evalSens(sh, v.colA, v.colB, v.cols[j]!, Atomics.load(this.ctrl, c.n), v.out[j]!, v.px, v.py, v.pz, v.one, v.psi, v.mom, v.proj);
      Atomics.store(this.ctrl, c.state, S_DONE);
    }
    while (Atomics.load(this.ctrl, c.state) !== S_DONE) {
      this.checkHelper();
      const p = Atomics.load(this.ctrl, PROGRESS);
      if (Atomics.load(this.ctrl, c.state) === S_DONE) break;
      Atomics.store(this.ctrl, MAIN_WAITS, 1);
      Atomics.wait(this.ctrl, PROGRESS, p, 50);
      Atomics.store(this.ctrl, MAIN_WAITS, 0);
    }
    return v.out[j]!;
  }

  /** Job j's sensitivities are no longer needed. */
  releaseSens(j: number): void {
    Atomics.store(this.ctrl, sensLayout(j).state, S_FREE);
  }

  /**
   * A free slot to fold the next block into, with what the block before
   * left in it (fold through `track`: openPosition before adding into a
   * position, or write a position's whole run and mark it; then seal). The
   * main thread transforms ready blocks while none is free.
   */
  acquire(): { slot: number; grids: Float64Array; track: SlotTrack } {
    for (;;) {
      for (let s = 0; s < this.slots.length; s++) {
        const c = ctrlLayout(this.ctrl, s);
        if (Atomics.compareExchange(this.ctrl, c.state, FREE, FILLING) !== FREE) continue;
        const track = this.tracks[s]!;
        track.written.fill(0);
        return { slot: s, grids: this.slots[s]!, track };
      }
      if (!this.runOne()) this.waitProgress();
    }
  }

  /** After the fold of an acquired slot: the runs the block before left and this fold did not write are zeroed (the slot then holds this block alone). */
  seal(slot: number): void {
    const t = this.tracks[slot]!, XB = this.slots[slot]!, NX = this.shared.setup.NX;
    for (let pos = 0; pos < t.stale.length; pos++) if (t.stale[pos] !== 0 && t.written[pos] === 0) XB.fill(0, 2 * pos * NX, 2 * (pos + 1) * NX);
    this.tracks[slot] = { written: t.stale, stale: t.written };
  }

  /** Hands over the acquired and sealed slot, holding the folded block of read columns a0 … a1−1. */
  publish(slot: number, a0: number, a1: number): void {
    const c = ctrlLayout(this.ctrl, slot);
    if (this.nl === 0) {
      Atomics.store(this.ctrl, c.state, FREE);
      return;
    }
    Atomics.store(this.ctrl, c.a0, a0);
    Atomics.store(this.ctrl, c.a1, a1);
    Atomics.store(this.ctrl, c.state, READY);
    // a sleeping helper is woken for two ready blocks, not one (each wake can cost the main
    // thread its core on a loaded machine); a lone ready block is transformed by whoever comes first
    Atomics.add(this.ctrl, GEN, 1);
    if (Atomics.load(this.ctrl, HELPER_WAITS) === 1) {
      let ready = 0;
      for (let k = 0; k < this.slots.length; k++) if (Atomics.load(this.ctrl, ctrlLayout(this.ctrl, k).state) === READY) ready++;
      if (ready >= 2) Atomics.notify(this.ctrl, GEN);
    }
  }

  /** Waits until every handed-over block is transformed (the main thread takes ready ones itself). */
  drain(): void {
    for (;;) {
      while (this.runOne()) { /* transformed one here */ }
      let busy = false;
      for (let s = 0; s < this.slots.length; s++) if (Atomics.load(this.ctrl, ctrlLayout(this.ctrl, s).state) !== FREE) busy = true;
      if (!busy) return;
      this.waitProgress();
    }
  }

  /**
   * Read round `round` (0 or 1, each once per run) of every coil on both
   * threads (after drain(); the constructor was given its factors): each
   * coil's lines, as readAxis makes them on either thread (the same bits).
   * The views are those of every round (the next round overwrites them).
   */
  readAll(round = 0): Float64Array[] {
    const rv = this.readViews!, jobs = rv.jobs, c = readLayout(round);
    Atomics.store(this.ctrl, c.go, 1);
    Atomics.add(this.ctrl, GEN, 1);
    if (Atomics.load(this.ctrl, HELPER_WAITS) === 1) Atomics.notify(this.ctrl, GEN);
    runReads(this.ctrl, rv);
    while (Atomics.load(this.ctrl, c.done) < jobs) {
      this.checkHelper();
      const p = Atomics.load(this.ctrl, PROGRESS);
      if (Atomics.load(this.ctrl, c.done) >= jobs) break;
      Atomics.store(this.ctrl, MAIN_WAITS, 1);
      Atomics.wait(this.ctrl, PROGRESS, p, 50);
      Atomics.store(this.ctrl, MAIN_WAITS, 0);
    }
    return rv.lines;
  }

  /** Ends the run on the helper's side (after drain()); returns the number of blocks the helper transformed. */
  end(): number {
    releaseMemory(this.shared.mem);
    Atomics.store(this.ctrl, END, 1);
    Atomics.add(this.ctrl, GEN, 1);
    Atomics.notify(this.ctrl, GEN);
    return Atomics.load(this.ctrl, PROGRESS);
  }

  /** Transforms a ready slot on this thread; false if none was ready. */
  private runOne(): boolean {
    for (let s = 0; s < this.slots.length; s++) {
      const c = ctrlLayout(this.ctrl, s);
      if (Atomics.compareExchange(this.ctrl, c.state, READY, BUSY_MAIN) !== READY) continue;
      const a0 = Atomics.load(this.ctrl, c.a0), a1 = Atomics.load(this.ctrl, c.a1);
      this.own.run(this.slots[s]!, this.list, this.nl, a0, a1);
      Atomics.store(this.ctrl, c.state, FREE);
      return true;
    }
    return false;
  }

  /** Stops the run when the helper failed (its block or sensitivities are lost). */
  private checkHelper(): void {
    if (Atomics.load(this.ctrl, FAILED) === 1) throw new Error("fast operator: the helper thread failed (see its error); run again with --workers 1 to stay on one thread");
  }

  private waitProgress(): void {
    this.checkHelper();
    const p = Atomics.load(this.ctrl, PROGRESS);
    let busy = false;
    for (let s = 0; s < this.slots.length; s++) if (Atomics.load(this.ctrl, ctrlLayout(this.ctrl, s).state) === BUSY_HELPER) busy = true;
    if (!busy) return;
    Atomics.store(this.ctrl, MAIN_WAITS, 1);
    Atomics.wait(this.ctrl, PROGRESS, p, 50);
    Atomics.store(this.ctrl, MAIN_WAITS, 0);
  }

}

/** The slots' views of a run's shared memory (after Z's zLen numbers). */
function slotViews(mem: SharedArrayBuffer, zLen: number, slotLen: number): Float64Array[] {
  return Array.from({ length: PHASE_SLOTS }, (_, k) => new Float64Array(mem, 8 * (zLen + k * slotLen), slotLen));
}

// ---------------------------------------------------------------------------
// Memory kept between runs, its pages written ahead by the helper thread.
//
// A page of new memory costs its first write (the kernel maps and zeroes it);
// on some virtual machines that is about 15 µs per 4 KB page, i.e. several
// hundred milliseconds for the Z of an eight-coil case. Where a helper thread
// exists (Node), the run's shared arrays come from one reserve: the helper
// writes its pages while the main thread is still sampling and planning, and
// later runs in the process (a dataset batch) reuse it, zeroed. Nothing of a
// run's numbers depends on where its memory came from.

/** The reserve: its buffer, the toucher's state (ctrl[0]) and stop request (ctrl[1]), bytes used by earlier runs, and whether a run holds it. */
interface Reserve { buf: SharedArrayBuffer; ctrl: Int32Array; dirty: number; inUse: boolean }
let reserve: Reserve | null = null;
const R_IDLE = 0, R_TOUCHING = 1, R_DONE = 2;
/** Largest reserve kept (bytes). */
const RESERVE_MAX = 512 * 2 ** 20;
/** Numbers written between checks for a stop request (1 MB). */
const TOUCH_CHUNK = 1 << 17;

/**
 * A new reserve of at least `bytes` for the next runs' shared arrays, to be
 * touched by the helper (touchReserve); null when the one kept already
 * serves, a run holds it, or the size is out of range.
 */
export function reservePhaseMemory(bytes: number): { buf: SharedArrayBuffer; ctrl: SharedArrayBuffer } | null {
  const n = 8 * Math.ceil(bytes / 8);
  if (!(n > 0 && n <= RESERVE_MAX)) return null;
  if (reserve && (reserve.inUse || reserve.buf.byteLength >= n)) return null;
  // a smaller reserve still being written is not needed any more
  if (reserve) Atomics.store(reserve.ctrl, 1, 1);
  const ctrl = new SharedArrayBuffer(8);
  reserve = { buf: new SharedArrayBuffer(n), ctrl: new Int32Array(ctrl), dirty: 0, inUse: false };
  return { buf: reserve.buf, ctrl };
}

/** The helper's side: writes a zero to every page of a reserve (until a run claims it), unless a run claimed it first. */
export function touchReserve(buf: SharedArrayBuffer, ctrlBuf: SharedArrayBuffer): void {
  const ctrl = new Int32Array(ctrlBuf);
  if (Atomics.compareExchange(ctrl, 0, R_IDLE, R_TOUCHING) !== R_IDLE) return;
  const v = new Float64Array(buf);
  for (let i0 = 0; i0 < v.length && Atomics.load(ctrl, 1) === 0; i0 += TOUCH_CHUNK) {
    const i1 = Math.min(v.length, i0 + TOUCH_CHUNK);
    for (let i = i0; i < i1; i += 512) v[i] = 0;
  }
  Atomics.store(ctrl, 0, R_DONE);
  Atomics.notify(ctrl, 0);
}

/** A run's shared memory of `bytes` (all zero): the reserve when it is free and large enough (its toucher stopped first), else new. */
function claimMemory(bytes: number): SharedArrayBuffer {
  const r = reserve;
  if (!r || r.inUse || r.buf.byteLength < bytes) return new SharedArrayBuffer(bytes);
  if (Atomics.compareExchange(r.ctrl, 0, R_IDLE, R_DONE) === R_TOUCHING) {
    Atomics.store(r.ctrl, 1, 1);
    while (Atomics.load(r.ctrl, 0) === R_TOUCHING) Atomics.wait(r.ctrl, 0, R_TOUCHING, 20);
  }
  r.inUse = true;
  if (r.dirty > 0) new Float64Array(r.buf, 0, Math.min(r.dirty, bytes) / 8).fill(0);
  r.dirty = Math.max(r.dirty, bytes);
  return r.buf;
}

/** Bytes of the reserve kept (0 for none), and how many of them runs have used (for tests). */
export function reservedBytes(): number {
  return reserve?.buf.byteLength ?? 0;
}
export function reserveUsed(): number {
  return reserve?.dirty ?? 0;
}

/** A run's memory is no longer used (the reserve is free for the next run). */
function releaseMemory(buf: SharedArrayBuffer): void {
  if (reserve !== null && reserve.buf === buf) reserve.inUse = false;
}
