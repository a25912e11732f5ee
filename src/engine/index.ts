/**
 * The engine stage: Bloch propagation of an isochromat set through a
 * sequence, chunk by chunk, into k-space [slice-encoding step·phase rows][read].
 * Chunk results are summed in chunk order, so the result is bitwise the
 * same however the chunks are shared among threads.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { ChunkScratch, runChunk } from "./chunk.js";
import { chunkRange, tryFast, wholeKspace, type KSpace } from "./executor.js";
import type { ReadoutChoice, ReadoutReport } from "./fast.js";
import { makePlan, type EnginePlan } from "./plan.js";
import { addInto, BLOCK_CHUNKS, BlockSummer } from "./sum.js";
import { chooseFold, foldFinish, foldRejected, partialLength } from "./fold.js";
import { DEFAULT_TOLERANCE } from "./fast.js";

export { makePlan, planLayout, spoiledUnits, chunkStarts, countChunks, type PlanOptions, fillRfMaps, rfClasses, shareEngineArrays, CHUNK_ISOCHROMATS, HAS_SHARED_MEMORY, type EnginePlan } from "./plan.js";
export { webWorkerExecutor, serveEngineWorker, type WebWorkerLike, type WebEngineRequest, type WebEngineReply } from "./web.js";
export { AbortedError, PARALLEL_RF_CLASSES, serialExecutor, simulateWith, simulateCells, chunkRange, type Executor, type ExecutorSession, type RunOptions, type KSpace } from "./executor.js";
export { BLOCK_CHUNKS, blockCount, shardBlocks, blockChunks, BlockSummer, addInto } from "./sum.js";
export { TupleIndex, f64Words } from "./hash.js";
export { readoutRecurrenceFast, wasmKernel, readoutKernelName, rfAffineMany, wasmRfKernel } from "./wasm.js";
export { runChunk, runChunkGeneral, runChunkSpoiled, ChunkScratch, GeneralScratch, SpoiledScratch, ReadoutScratch, receiverFilter, readoutGroups } from "./chunk.js";
export * from "./kernels.js";
export { CellStream } from "./fast-stream.js";
export { chooseFold, fitShape, foldFinish, partialLength, FOLD_MAX_SEGMENTS, FOLD_SPLIT, FOLD_ESTIMATE_LINES, FOLD_MAX_PARTIAL_BYTES, type FoldSpec, type FoldShape } from "./fold.js";
export { fastReadout, fastReadoutFrom, pivotedBasis, predictReadoutCosts, resolveReadout, DEFAULT_TOLERANCE, MAX_CLASS_LINES, ESTIMATE_SAMPLES, ESTIMATE_SEED, type ReadoutChoice, type ReadoutOperator, type ReadoutCosts, type ReadoutReport, type FastResult } from "./fast.js";

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
  /** Use the WebAssembly SIMD kernels where available (default true). */
  wasm?: boolean;
  /** Called with each block sum in block order (arrays reused afterwards: copy to keep). */
  onBlock?: (b: number, re: Float64Array, im: Float64Array) => void;
  /**
   * Readout operator: "auto" (default: the cheaper of the two by a cost
   * predicted from the plan, engine/fast.ts predictReadoutCosts), "fast"
   * (engine/fast.ts, exact to `tolerance`, falls back to "direct" where it
   * does not apply, saying why) or "direct" (every isochromat through the
   * readout recurrence; the oracle).
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
 * Single-threaded reference run: every chunk in order, partials added in the
 * fixed order of sum.ts (chunk order within blocks, then block order).
 */
export function simulateSerial(seq: Sequence, iso: IsochromatSet, opts: SimulateOptions): SimulateResult {
  const plan = makePlan(seq, iso, { receiverFilter: opts.receiverFilter, coils: opts.coils, sens: opts.sens, chunkIsochromats: opts.chunkIsochromats, general: opts.general, wasm: opts.wasm });
  const f = tryFast(seq, iso, plan, opts);
  if (f.kspace) return { kspace: f.kspace, plan, readout: f.readout };
  // the fold runs every chunk, a shard's too (its partials are not k-space block sums: the whole fold is finished and
  // block 0 carries it, as for the fast operator); the direct readout runs the shard's blocks
  const runAll = (whole: boolean): { re: Float64Array; im: Float64Array } => {
    const [c0, c1] = whole ? [0, plan.chunks] : chunkRange(plan, opts.blocks);
    const size = partialLength(plan);
    if (c1 - c0 === 1) {
      // one chunk (e.g. the probe column of the through-slice check): the fixed order gives the
      // block sum 0 + partial and the total 0 + block sum, i.e. the partial with −0 made +0; one pair of arrays instead of three
      const re = new Float64Array(size), im = new Float64Array(size);
      runChunk(plan, iso, c0, re, im, new ChunkScratch(plan));
      for (let j = 0; j < size; j++) {
        re[j] = 0 + re[j]!;
        im[j] = 0 + im[j]!;
      }
      if (!whole) opts.onBlock?.(Math.floor(c0 / BLOCK_CHUNKS), re, im);
      opts.onProgress?.(1, 1);
      return { re, im };
    }
    const re = new Float64Array(size), im = new Float64Array(size);
    const pr = new Float64Array(size), pi = new Float64Array(size);
    const scratch = new ChunkScratch(plan);
    const summer = new BlockSummer(size, c0, c1, (b, bre, bim) => {
      if (!whole) opts.onBlock?.(b, bre, bim);
      addInto(re, im, bre, bim);
    });
    for (let c = c0; c < c1; c++) {
      pr.fill(0);
      pi.fill(0);
      runChunk(plan, iso, c, pr, pi, scratch);
      summer.add(c, pr, pi);
      opts.onProgress?.(c - c0 + 1, c1 - c0);
    }
    return { re, im };
  };
  // the time-segmented fold of the readout (fold.ts) for plans the general path plays
  const tolerance = opts.tolerance ?? DEFAULT_TOLERANCE;
  const fold = chooseFold(seq, iso, plan, opts, f.readout, tolerance);
  let readout = fold.report;
  if (fold.spec) {
    plan.fold = fold.spec;
    const y = runAll(true);
    const r = foldFinish(plan, y.re, y.im, iso, tolerance);
    plan.fold = null;
    if (r.estimate.relL2 <= tolerance) {
      const report = { ...readout, estimate: r.estimate };
      return { kspace: wholeKspace(r.re, r.im, plan, opts, report, "folded"), plan, readout: report };
    }
    readout = foldRejected(readout, r.estimate.relL2, tolerance);
  }
  const k = runAll(false);
  return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re: k.re, im: k.im }, plan, readout };
}
export { checkSliceConvergence, SLICE_CONVERGENCE_TOLERANCE, type SliceConvergence } from "./convergence.js";
