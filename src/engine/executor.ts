/**
 * Where the chunks of a plan run. An Executor opens one session per engine
 * run; the session fills RF maps and runs chunks, handing each chunk's
 * partial k-space back to the driver (simulateWith), which adds partials in
 * the fixed order of sum.ts. So every executor gives bitwise the same
 * k-space: serial on this thread (tests, small runs, a page without
 * workers), worker_threads in Node (engine/pool.ts), Web Workers in a
 * browser (same contract: post the plan and isochromats once — shared
 * memory where the page is cross-origin isolated, else copies — then chunk
 * indices; transfer each partial back).
 */
import type { IsochromatSet } from "../isochromats/index.js";
import type { Sequence } from "../sequence/types.js";
import { ChunkScratch, runChunk } from "./chunk.js";
import { fillRfMaps, planLayout, shareEngineArrays, type EnginePlan, type PlanOptions } from "./plan.js";
import { addInto, BlockSummer, blockChunks } from "./sum.js";

/** Below this many RF classes the maps are filled on the calling thread (cheaper than a round trip). */
export const PARALLEL_RF_CLASSES = 2048;

/** Thrown (as the rejection) when an AbortSignal stops a run. */
export class AbortedError extends Error {
  constructor() {
    super("interrupted");
  }
}

/** One engine run on an executor: a plan and its isochromats, already handed over. */
export interface ExecutorSession {
  /** Workers in this session (1 for serial). */
  readonly size: number;
  /** Fills the plan's RF maps of classes 0 … classes−1 (in place). */
  fillRfMaps(classes: number, signal?: AbortSignal): Promise<void>;
  /**
   * Runs chunks c0 … c1−1 and hands each partial k-space to onChunk(c, re, im)
   * (any order; the arrays are the caller's to keep). At most a window of
   * chunks past `waitingFor()` may be outstanding, so held partials stay bounded.
   * Rejects with AbortedError when `signal` aborts.
   */
  runChunks(c0: number, c1: number, onChunk: (c: number, re: Float64Array, im: Float64Array) => void, waitingFor: () => number, signal?: AbortSignal): Promise<void>;
  /** Releases the workers (also after a failure or an abort). */
  close(): Promise<void>;
}

export interface Executor {
  /** Opens a session over `plan` and `iso` using at most `jobs` workers (no more are useful). */
  open(plan: EnginePlan, iso: IsochromatSet, jobs: number): ExecutorSession;
}

/** Runs everything on the calling thread, chunk after chunk. */
export function serialExecutor(): Executor {
  return {
    open(plan, iso) {
      let scratch: ChunkScratch | null = null;
      const size = plan.coils * plan.rows * plan.read;
      return {
        size: 1,
        async fillRfMaps(classes, signal) {
          if (signal?.aborted) throw new AbortedError();
          fillRfMaps(plan, 0, classes);
        },
        async runChunks(c0, c1, onChunk, _waitingFor, signal) {
          scratch ??= new ChunkScratch(plan);
          for (let c = c0; c < c1; c++) {
            if (signal?.aborted) throw new AbortedError();
            const re = new Float64Array(size), im = new Float64Array(size);
            runChunk(plan, iso, c, re, im, scratch);
            onChunk(c, re, im);
          }
        },
        async close() {},
      };
    },
  };
}

/** What every engine run takes besides the sequence and isochromats. */
export interface RunOptions extends PlanOptions {
  /** Called after each chunk with (done, total). */
  onProgress?: (done: number, total: number) => void;
  /** Only these blocks [b0, b1) of BLOCK_CHUNKS chunks (for sharding); default all. */
  blocks?: [number, number];
  /** Called with each block sum in block order (arrays reused afterwards: copy to keep). */
  onBlock?: (b: number, re: Float64Array, im: Float64Array) => void;
  /** Aborting stops the run; the promise then rejects with AbortedError. */
  signal?: AbortSignal;
  /** Called once the plan is made, before any chunk runs. */
  onPlan?: (plan: EnginePlan) => void;
}

/** k-space of one engine run, layout [coil][row][read]; rows = slice-encoding steps × phase lines. */
export interface KSpace {
  coils: number;
  rows: number;
  read: number;
  re: Float64Array;
  im: Float64Array;
}

/** Chunks c0 … c1−1 of the blocks asked for (all by default). */
export function chunkRange(plan: EnginePlan, blocks?: [number, number]): [number, number] {
  if (!blocks) return [0, plan.chunks];
  return blockChunks(plan.chunks, blocks[0], blocks[1]);
}

/**
 * One engine run on any executor: plan (isochromats in shared memory where
 * there is such), RF maps (on the workers when there are many classes),
 * chunks, partials added in the fixed order of sum.ts. Bitwise the same
 * k-space for every executor and worker count.
 */
export async function simulateWith(executor: Executor, seq: Sequence, iso: IsochromatSet, opts: RunOptions): Promise<{ kspace: KSpace; plan: EnginePlan }> {
  const shared = shareEngineArrays(iso);
  const plan = planLayout(seq, shared, opts);
  opts.onPlan?.(plan);
  const [c0, c1] = chunkRange(plan, opts.blocks);
  const session = executor.open(plan, shared, Math.max(1, c1 - c0, plan.classes >= PARALLEL_RF_CLASSES ? Infinity : 1));
  try {
    if (plan.classes >= PARALLEL_RF_CLASSES && session.size > 1) await session.fillRfMaps(plan.classes, opts.signal);
    else fillRfMaps(plan, 0, plan.classes);
    const size = plan.coils * plan.rows * plan.read;
    const re = new Float64Array(size), im = new Float64Array(size);
    const summer = new BlockSummer(size, c0, c1, (b, bre, bim) => {
      opts.onBlock?.(b, bre, bim);
      addInto(re, im, bre, bim);
    });
    let done = 0;
    await session.runChunks(c0, c1, (c, pr, pi) => {
      summer.add(c, pr, pi);
      opts.onProgress?.(++done, c1 - c0);
    }, () => summer.waitingFor, opts.signal);
    if (!summer.done) throw new Error("engine: not every chunk arrived");
    return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re, im }, plan };
  } finally {
    await session.close();
  }
}
