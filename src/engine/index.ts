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
import { EnginePool, PARALLEL_RF_CLASSES } from "./pool.js";
import { addInto, BlockSummer, blockChunks } from "./sum.js";

export { makePlan, planLayout, spoiledUnits, chunkStarts, countChunks, type PlanOptions, fillRfMaps, rfClasses, shareIsochromats, shareEngineArrays, CHUNK_ISOCHROMATS, type EnginePlan } from "./plan.js";
export { EnginePool, AbortedError, workerPath, PARALLEL_RF_CLASSES } from "./pool.js";
export { BLOCK_CHUNKS, blockCount, shardBlocks, blockChunks, BlockSummer, addInto } from "./sum.js";
export { TupleIndex, f64Words } from "./hash.js";
export { readoutRecurrenceFast, wasmKernel, readoutKernelName, rfAffineMany, wasmRfKernel } from "./wasm.js";
export { runChunk, runChunkGeneral, runChunkSpoiled, ChunkScratch, receiverFilter, readoutGroups } from "./chunk.js";
export * from "./kernels.js";

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
export function simulateSerial(seq: Sequence, iso: IsochromatSet, opts: SimulateOptions): { kspace: KSpace; plan: EnginePlan } {
  const plan = makePlan(seq, iso, { receiverFilter: opts.receiverFilter, coils: opts.coils, sens: opts.sens, chunkIsochromats: opts.chunkIsochromats, general: opts.general });
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
  return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, plan };
}

/**
 * The same result as {@link simulateSerial}, bitwise, on a pool of worker
 * threads: the isochromats are moved to shared memory, RF maps of many
 * classes are filled in parallel, chunks are scheduled dynamically and their
 * partials summed in the fixed order on this thread.
 */
export async function simulateParallel(seq: Sequence, iso: IsochromatSet, opts: ParallelOptions): Promise<{ kspace: KSpace; plan: EnginePlan }> {
  const shared = shareEngineArrays(iso);
  const plan = planLayout(seq, shared, { receiverFilter: opts.receiverFilter, coils: opts.coils, sens: opts.sens, chunkIsochromats: opts.chunkIsochromats, general: opts.general });
  opts.onPlan?.(plan);
  const [c0, c1] = chunkRange(plan, opts.blocks);
  // no more workers than chunks (nor than RF class ranges when those are filled in parallel)
  const pool = new EnginePool(plan, shared, Math.max(1, Math.min(opts.workers, Math.max(c1 - c0, plan.classes >= PARALLEL_RF_CLASSES ? opts.workers : 1))));
  try {
    if (plan.classes >= PARALLEL_RF_CLASSES && pool.size > 1) await pool.fillRfMaps(plan.classes, opts.signal);
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
    return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, plan };
  } finally {
    await pool.terminate();
  }
}
export { checkSliceConvergence, SLICE_CONVERGENCE_TOLERANCE, type SliceConvergence } from "./convergence.js";
