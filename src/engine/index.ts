/**
 * The engine stage: Bloch propagation of an isochromat set through a
 * sequence, chunk by chunk, into k-space [slice-encoding step·phase rows][read].
 * Chunk results are summed in chunk order, so the result is bitwise the
 * same however the chunks are shared among threads.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { ChunkScratch, runChunk } from "./chunk.js";
import { fillRfMaps, makePlan, planLayout, shareEngineArrays, type EnginePlan } from "./plan.js";
import { AbortedError, EnginePool, PARALLEL_RF_CLASSES } from "./pool.js";
import { addInto, BlockSummer, blockChunks } from "./sum.js";
import { DEFAULT_TOLERANCE, fastPrecheck, fastReadout, type ReadoutChoice, type ReadoutReport } from "./fast.js";

export { makePlan, planLayout, spoiledUnits, chunkStarts, countChunks, type PlanOptions, fillRfMaps, rfClasses, shareIsochromats, shareEngineArrays, CHUNK_ISOCHROMATS, type EnginePlan } from "./plan.js";
export { EnginePool, AbortedError, workerPath, PARALLEL_RF_CLASSES } from "./pool.js";
export { BLOCK_CHUNKS, blockCount, shardBlocks, blockChunks, BlockSummer, addInto } from "./sum.js";
export { TupleIndex, f64Words } from "./hash.js";
export { readoutRecurrenceFast, wasmKernel, readoutKernelName, rfAffineMany, wasmRfKernel } from "./wasm.js";
export { runChunk, runChunkGeneral, runChunkSpoiled, ChunkScratch, receiverFilter, readoutGroups } from "./chunk.js";
export * from "./kernels.js";
export { fastReadout, pivotedBasis, DEFAULT_TOLERANCE, ESTIMATE_SAMPLES, ESTIMATE_SEED, type ReadoutChoice, type ReadoutReport, type FastResult } from "./fast.js";

export interface KSpace {
  /** Layout [coil][row][read]; rows = slice-encoding steps × phase lines. */
  coils: number;
  rows: number;
  read: number;
  re: Float64Array;
  im: Float64Array;
}

export interface SimulateOptions {
  receiverFilter: boolean;
  /** Receive coils and their sensitivities per isochromat (see EnginePlan.sens); default one uniform coil. */
  coils?: number;
  sens?: Float64Array | null;
  /** Called after each chunk with (done, total). */
  onProgress?: (done: number, total: number) => void;
  /** Only these blocks [b0, b1) of BLOCK_CHUNKS chunks (for sharding); default all. */
  blocks?: [number, number];
  /** Isochromats per chunk (default CHUNK_ISOCHROMATS). */
  chunkIsochromats?: number;
  /** Play every op per isochromat even where an exact shortcut applies (the oracle; default false). */
  general?: boolean;
  /** Called with each block sum in block order (arrays reused afterwards: copy to keep). */
  onBlock?: (b: number, re: Float64Array, im: Float64Array) => void;
  /**
   * Readout operator: "fast" (default; engine/fast.ts, exact to `tolerance`,
   * falls back to "direct" where it does not apply, saying why) or "direct"
   * (every isochromat through the readout recurrence; the oracle).
   */
  readout?: ReadoutChoice;
  /** Relative L2 error of k-space allowed to the fast operator (default 1e-6). */
  tolerance?: number;
}

/** Result of a simulation: k-space, the plan, and what the readout operator did. */
export interface SimulateResult {
  kspace: KSpace;
  plan: EnginePlan;
  readout: ReadoutReport;
}

/**
 * Tries the fast operator on a plan whose RF maps are filled. Returns its
 * k-space, or null with the report saying why the direct operator must run.
 * A fast result whose a-posteriori estimate exceeds the tolerance is
 * discarded (direct runs instead): never silently wrong.
 */
function tryFast(seq: Sequence, iso: IsochromatSet, plan: EnginePlan, opts: SimulateOptions): { kspace: KSpace | null; readout: ReadoutReport } {
  const tolerance = opts.tolerance ?? DEFAULT_TOLERANCE;
  const requested = opts.readout ?? "fast";
  const direct = (fallback?: string): { kspace: null; readout: ReadoutReport } => ({ kspace: null, readout: { operator: "direct", requested, tolerance, ...(fallback ? { fallback } : {}) } });
  if (requested === "direct") return direct();
  if (opts.general) return direct("the general path was forced (general: true)");
  // the factors' truncation is set from norms weighted by magnetization; where the
  // signal cancels (e.g. T2′ dephasing) the k-space error is relatively larger:
  // the a-posteriori estimate decides, tightening the truncation twice before giving up
  let r: ReturnType<typeof fastReadout> = "";
  let est = Infinity;
  for (const split of [8, 80, 800]) {
    r = fastReadout(seq, plan, iso, tolerance, split);
    if (typeof r === "string") return direct(r);
    est = r.report.estimate?.relL2 ?? 0;
    if (est <= tolerance) break;
  }
  if (typeof r === "string") return direct(r);
  if (!(est <= tolerance)) return direct(`the fast operator's a-posteriori error estimate ${est.toExponential(2)} exceeded the tolerance ${tolerance} at the tightest truncation`);
  // no −0 (so adding the zero block sums of a sharded run keeps the bits)
  for (let k = 0; k < r.re.length; k++) {
    r.re[k] = r.re[k]! + 0;
    r.im[k] = r.im[k]! + 0;
  }
  let re = r.re, im = r.im;
  if (opts.blocks) {
    // Sharded: every shard computes the same fast k-space (and the same
    // decision); block 0 carries all of it, every other block is zero, so the
    // merged shards equal the single run bit for bit.
    const zr = new Float64Array(re.length), zi = new Float64Array(re.length);
    for (let b = opts.blocks[0]; b < opts.blocks[1]; b++) opts.onBlock?.(b, b === 0 ? re : zr, b === 0 ? im : zi);
    if (opts.blocks[0] > 0 || opts.blocks[1] <= 0) {
      re = zr;
      im = zi;
    }
    r.report.sharding = "the shard holding block 0 carries the whole fast k-space; the other shards' blocks are zero";
  }
  opts.onProgress?.(1, 1);
  return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, readout: r.report };
}

/** Whether a fast attempt is worth filling the RF maps for on this thread first. */
function fastWanted(plan: EnginePlan, opts: SimulateOptions): boolean {
  return (opts.readout ?? "fast") === "fast" && !opts.general && fastPrecheck(plan) === null;
}

export interface ParallelOptions extends SimulateOptions {
  /** Worker threads (≥ 1). */
  workers: number;
  /** Aborting stops the workers at once; the promise then rejects with AbortedError. */
  signal?: AbortSignal;
  /** Called once the plan is made, before any chunk runs. */
  onPlan?: (plan: EnginePlan) => void;
}

function chunkRange(plan: EnginePlan, blocks?: [number, number]): [number, number] {
  if (!blocks) return [0, plan.chunks];
  return blockChunks(plan.chunks, blocks[0], blocks[1]);
}

/**
 * Single-threaded reference run: every chunk in order, partials added in the
 * fixed order of sum.ts (chunk order within blocks, then block order).
 */
export function simulateSerial(seq: Sequence, iso: IsochromatSet, opts: SimulateOptions): SimulateResult {
  const plan = makePlan(seq, iso, { receiverFilter: opts.receiverFilter, coils: opts.coils, sens: opts.sens, chunkIsochromats: opts.chunkIsochromats, general: opts.general });
  const f = tryFast(seq, iso, plan, opts);
  if (f.kspace) return { kspace: f.kspace, plan, readout: f.readout };
  const size = plan.coils * plan.rows * plan.read;
  const re = new Float64Array(size), im = new Float64Array(size);
  const pr = new Float64Array(size), pi = new Float64Array(size);
  const scratch = new ChunkScratch(plan);
  const [c0, c1] = chunkRange(plan, opts.blocks);
  const summer = new BlockSummer(size, c0, c1, (b, bre, bim) => {
    opts.onBlock?.(b, bre, bim);
    addInto(re, im, bre, bim);
  });
  for (let c = c0; c < c1; c++) {
    pr.fill(0);
    pi.fill(0);
    runChunk(plan, iso, c, pr, pi, scratch);
    summer.add(c, pr, pi);
    opts.onProgress?.(c - c0 + 1, c1 - c0);
  }
  return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, plan, readout: f.readout };
}

/**
 * The same result as {@link simulateSerial}, bitwise, on a pool of worker
 * threads: the isochromats are moved to shared memory, RF maps of many
 * classes are filled in parallel, chunks are scheduled dynamically and their
 * partials summed in the fixed order on this thread.
 */
export async function simulateParallel(seq: Sequence, iso: IsochromatSet, opts: ParallelOptions): Promise<SimulateResult> {
  const shared = shareEngineArrays(iso);
  const plan = planLayout(seq, shared, { receiverFilter: opts.receiverFilter, coils: opts.coils, sens: opts.sens, chunkIsochromats: opts.chunkIsochromats, general: opts.general });
  opts.onPlan?.(plan);
  // the fast operator runs on this thread (no workers spawned)
  let readout: ReadoutReport;
  let filled = false;
  if (fastWanted(plan, opts)) {
    filled = true;
    fillRfMaps(plan, 0, plan.classes);
    if (opts.signal?.aborted) throw new AbortedError();
    const f = tryFast(seq, shared, plan, opts);
    // let a pending interrupt (SIGINT) arrive before the result is used
    await new Promise((r) => setImmediate(r));
    if (opts.signal?.aborted) throw new AbortedError();
    if (f.kspace) return { kspace: f.kspace, plan, readout: f.readout };
    readout = f.readout;
  } else {
    readout = tryFast(seq, shared, plan, { ...opts, readout: "direct" }).readout;
    if ((opts.readout ?? "fast") === "fast") readout = directReason(plan, opts, readout);
  }
  const [c0, c1] = chunkRange(plan, opts.blocks);
  // no more workers than chunks (nor than RF class ranges when those are filled in parallel)
  const pool = new EnginePool(plan, shared, Math.max(1, Math.min(opts.workers, Math.max(c1 - c0, plan.classes >= PARALLEL_RF_CLASSES ? opts.workers : 1))));
  try {
    if (filled) { /* filled for the fast attempt */ }
    else if (plan.classes >= PARALLEL_RF_CLASSES && pool.size > 1) await pool.fillRfMaps(plan.classes, opts.signal);
    else fillRfMaps(plan, 0, plan.classes);
    const size = plan.coils * plan.rows * plan.read;
    const re = new Float64Array(size), im = new Float64Array(size);
    const summer = new BlockSummer(size, c0, c1, (b, bre, bim) => {
      opts.onBlock?.(b, bre, bim);
      addInto(re, im, bre, bim);
    });
    let done = 0;
    await pool.runChunks(c0, c1, (c, pr, pi) => {
      summer.add(c, pr, pi);
      opts.onProgress?.(++done, c1 - c0);
    }, () => summer.waitingFor, opts.signal);
    if (!summer.done) throw new Error("engine pool: not every chunk arrived");
    return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, plan, readout };
  } finally {
    await pool.terminate();
  }
}

/** The report of a direct run when the fast operator was asked for but not tried. */
function directReason(plan: EnginePlan, opts: SimulateOptions, r: ReadoutReport): ReadoutReport {
  const fallback = opts.general
      ? "the general path was forced (general: true)"
      : fastPrecheck(plan) ?? "direct operator";
  return { ...r, requested: "fast", fallback };
}
export { checkSliceConvergence, SLICE_CONVERGENCE_TOLERANCE, type SliceConvergence } from "./convergence.js";
