/**
 * The engine stage: Bloch propagation of an isochromat set through a
 * sequence, chunk by chunk, into k-space [partitions·phase rows][read].
 * Chunk results are summed in chunk order, so the result is bitwise the
 * same however the chunks are shared among threads.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { ChunkScratch, runChunk } from "./chunk.js";
import { makePlan, type EnginePlan } from "./plan.js";

export { makePlan, shareIsochromats, CHUNK_ISOCHROMATS, type EnginePlan } from "./plan.js";
export { runChunk, ChunkScratch, receiverFilter } from "./chunk.js";
export * from "./kernels.js";

export interface KSpace {
  /** Layout [coil][row][read]; rows = partitions × phase lines. */
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
  /** Only these chunks (for sharding); default all. */
  chunks?: number[];
}

/** Single-threaded reference run: every chunk in order, partial sums added in chunk order. */
export function simulateSerial(seq: Sequence, iso: IsochromatSet, opts: SimulateOptions): { kspace: KSpace; plan: EnginePlan } {
  const plan = makePlan(seq, iso, { receiverFilter: opts.receiverFilter, coils: opts.coils, sens: opts.sens });
  const size = plan.coils * plan.rows * plan.read;
  const re = new Float64Array(size), im = new Float64Array(size);
  const pr = new Float64Array(size), pi = new Float64Array(size);
  const scratch = new ChunkScratch(plan);
  const list = opts.chunks ?? Array.from({ length: plan.chunks }, (_, c) => c);
  list.forEach((c, k) => {
    pr.fill(0);
    pi.fill(0);
    runChunk(plan, iso, c, pr, pi, scratch);
    for (let j = 0; j < size; j++) {
      re[j] = re[j]! + pr[j]!;
      im[j] = im[j]! + pi[j]!;
    }
    opts.onProgress?.(k + 1, list.length);
  });
  return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, plan };
}

