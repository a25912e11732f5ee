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
import { chunkStarts, fillRfMaps, planFromClasses, planLayout, shareEngineArrays, type EnginePlan, type PlanOptions } from "./plan.js";
import { CellStream, coherenceSpan, MAX_STREAM_CLASSES, type CellSensitivities } from "./fast-stream.js";
import type { IsochromatCells } from "../isochromats/index.js";
import { addInto, BlockSummer, blockChunks } from "./sum.js";
import { chooseFold, foldFinish, foldRejected, partialLength } from "./fold.js";
import {
  DEFAULT_TOLERANCE, MAX_CLASS_LINES, fastPrecheck, fillRfMapsShared, fastReadout, fastReadoutFrom, predictCosts, prepareHelperMemory, resolveReadout,
  type FastResult, type ReadoutChoice, type ReadoutCosts, type ReadoutOperator, type ReadoutReport,
} from "./fast.js";

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
  /**
   * Threads this executor may keep busy (Node: its worker count). The fast
   * readout operator, which runs on the calling thread, shares its FFTs with
   * one helper thread only where this is 2 or more (or not given). The bits
   * are the same either way.
   */
  readonly threads?: number;
  /** Opens a session over `plan` and `iso` using at most `jobs` workers (no more are useful). */
  open(plan: EnginePlan, iso: IsochromatSet, jobs: number): ExecutorSession;
}

/** Runs everything on the calling thread, chunk after chunk. */
export function serialExecutor(): Executor {
  return {
    open(plan, iso) {
      let scratch: ChunkScratch | null = null;
      const size = partialLength(plan);
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

/** What the fast readout attempt reads of an engine run's options. */
export interface FastOptions {
  readout?: ReadoutChoice;
  tolerance?: number;
  general?: boolean;
  blocks?: [number, number];
  onBlock?: (b: number, re: Float64Array, im: Float64Array) => void;
  onProgress?: (done: number, total: number) => void;
  /** Threads the fast operator may use (see Executor.threads; 1 = the calling thread only). */
  threads?: number;
}

/**
 * Tries the fast operator on a plan whose RF maps are filled. Returns its
 * k-space, or null with the report saying why the direct operator must run.
 * A fast result whose a-posteriori estimate exceeds the tolerance is
 * discarded (direct runs instead): never silently wrong.
 */
export function tryFast(seq: Sequence, iso: IsochromatSet, plan: EnginePlan, opts: FastOptions): { kspace: KSpace | null; readout: ReadoutReport } {
  const tolerance = opts.tolerance ?? DEFAULT_TOLERANCE;
  const requested = opts.readout ?? "auto";
  // auto: the operator of lower cost predicted from the plan (engine/fast.ts), the same for any workers or shards
  const sel = opts.general ? { use: "direct" as const } : resolveReadout(seq, plan, iso, requested, tolerance);
  const auto = sel.costs ? { choice: sel.use, predicted: sel.costs } : {};
  const direct = (fallback?: string): { kspace: null; readout: ReadoutReport } => ({ kspace: null, readout: { operator: "direct", requested, tolerance, ...(fallback ? { fallback } : {}), ...auto } });
  if (requested === "direct") return direct();
  if (opts.general) return direct("the general path was forced (general: true)");
  if (sel.use === "direct") return direct(sel.costs?.fastMs === null ? fastPrecheck(plan) ?? undefined : undefined);
  // the factors' truncation is set from norms weighted by magnetization; where the
  // signal cancels (e.g. T2′ dephasing) the k-space error is relatively larger:
  // the a-posteriori estimate decides, tightening the truncation twice before giving up
  let r: ReturnType<typeof fastReadout> = "";
  let est = Infinity;
  for (const split of [8, 80, 800]) {
    r = fastReadout(seq, plan, iso, tolerance, split, (opts.threads ?? 2) >= 2);
    if (typeof r === "string") return direct(r);
    est = r.report.estimate?.relL2 ?? 0;
    if (est <= tolerance) break;
  }
  if (typeof r === "string") return direct(r);
  if (!(est <= tolerance)) return direct(`the fast operator's a-posteriori error estimate ${est.toExponential(2)} exceeded the tolerance ${tolerance} at the tightest truncation`);
  Object.assign(r.report, { requested }, auto);
  return { kspace: fastKspace(r, plan, opts), readout: r.report };
}

/** The fast result as the run's k-space: no −0; with blocks (sharding) block 0 carries all of it. */
function fastKspace(r: FastResult, plan: EnginePlan, opts: FastOptions): KSpace {
  return wholeKspace(r.re, r.im, plan, opts, r.report, "fast");
}

/**
 * A k-space computed whole (the fast operator's, or the time-segmented fold's) as the run's: −0 made +0
 * (so adding the zero block sums of a sharded run keeps the bits); with blocks (sharding) every shard has
 * computed the same k-space and made the same decision, block 0 carries all of it and every other block is
 * zero, so the merged shards equal the single run bit for bit.
 */
export function wholeKspace(re: Float64Array, im: Float64Array, plan: EnginePlan, opts: { blocks?: [number, number]; onBlock?: (b: number, re: Float64Array, im: Float64Array) => void; onProgress?: (done: number, total: number) => void }, report: ReadoutReport, what: string): KSpace {
  for (let k = 0; k < re.length; k++) {
    re[k] = re[k]! + 0;
    im[k] = im[k]! + 0;
  }
  if (opts.blocks) {
    const zr = new Float64Array(re.length), zi = new Float64Array(re.length);
    for (let b = opts.blocks[0]; b < opts.blocks[1]; b++) opts.onBlock?.(b, b === 0 ? re : zr, b === 0 ? im : zi);
    if (opts.blocks[0] > 0 || opts.blocks[1] <= 0) {
      re = zr;
      im = zi;
    }
    report.sharding = `the shard holding block 0 carries the whole ${what} k-space; the other shards' blocks are zero`;
  }
  opts.onProgress?.(1, 1);
  return { coils: plan.coils, rows: plan.rows, read: plan.read, re, im };
}

/**
 * One engine run from sampled cells: where the fast operator applies and is
 * chosen, its weights are streamed from the cells (engine/fast-stream.ts) and
 * no isochromat is stored; otherwise `materialise()` makes the isochromats and
 * {@link simulateWith} runs (it may still use the fast operator on them, e.g.
 * when the caller stores isochromats for its coils). The choice depends on the inputs only, so the bits are the
 * same for any executor, number of workers or shards.
 */
export async function simulateCells(
  executor: Executor, seq: Sequence, cells: IsochromatCells, materialise: () => IsochromatSet, opts: RunOptions,
  coils?: { sens: CellSensitivities; stored: (opts: RunOptions) => Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }> },
): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }> {
  const requested = opts.readout ?? "auto";
  const tolerance = opts.tolerance ?? DEFAULT_TOLERANCE;
  // with coils the caller runs the stored path (sensitivities per isochromat)
  const storedWith = (o: RunOptions) => (coils ? coils.stored(o) : simulateWith(executor, seq, materialise(), o));
  const stored = () => storedWith(opts);
  if (requested === "direct" || opts.general || (opts.coils ?? 1) !== 1 || opts.sens || CellStream.refusal(cells) !== null) return stored();
  // with a B0 model the classes are hashed from the cells, stopping where the line factor could not hold them (fastPrecheck)
  const nAdc = seq.blocks.reduce((n, b) => n + (b.kind === "adc" ? 1 : 0), 0);
  // (a B0 model with very many classes: interpolated in Δf within the tolerance, where that gives fewer)
  const stream = new CellStream(cells, coils?.sens ?? null, Math.min(MAX_STREAM_CLASSES, Math.floor(MAX_CLASS_LINES / Math.max(1, nAdc))), { span: coherenceSpan(seq), tolerance });
  if (stream.tooMany !== null) {
    const res = await storedWith(opts);
    return { ...res, readout: { ...res.readout, weights: stream.tooMany } };
  }
  // the plan's options written out (one object shape on every run: a spread of the caller's options gave the plan
  // code a new shape per caller and cost V8 a recompile of it in later runs)
  const planOpts: PlanOptions = {
    receiverFilter: opts.receiverFilter, coils: coils?.sens.coils ?? 1, sens: null, chunkIsochromats: opts.chunkIsochromats,
    general: opts.general ?? false, wasm: opts.wasm ?? true, sliceTablesOnly: true,
  };
  const plan = planFromClasses(seq, cells, stream.spec, chunkStarts(cells, opts.chunkIsochromats), planOpts);
  if (fastPrecheck(plan) !== null) return stored();
  // the helper writes the pages of the fast operator's shared arrays from now on (before the cost prediction)
  prepareHelperMemory(seq, plan, cells, tolerance, executor.threads ?? 2);
  let auto: { choice?: ReadoutOperator; predicted?: ReadoutCosts } = {};
  if (requested === "auto") {
    const costs = predictCosts(seq, plan, cells, (i0, i1, sink) => {
      // whole columns of the chunk
      let c0 = 0, hi = cells.columns;
      while (c0 < hi) {
        const mid = (c0 + hi) >> 1;
        if (cells.colStart[mid]! < i0) c0 = mid + 1;
        else hi = mid;
      }
      let c1 = c0;
      while (c1 < cells.columns && cells.colStart[c1]! < i1) c1++;
      stream.columnRange(c0, c1, (a, b, n, cls) => sink.column(a, b, n, cls));
    }, tolerance, 8, true);
    const use: ReadoutOperator = costs.fastMs !== null && costs.fastMs < costs.directMs ? "fast" : "direct";
    auto = { choice: use, predicted: costs };
    if (use === "direct") {
      const res = await storedWith({ ...opts, readout: "direct" });
      return { ...res, readout: { ...res.readout, requested, ...auto } };
    }
  }
  opts.onPlan?.(plan);
  fillRfMapsShared(plan, (executor.threads ?? 2) >= 2);
  if (opts.signal?.aborted) throw new AbortedError();
  let r: FastResult | string = "";
  let est = Infinity;
  for (const split of [8, 80, 800]) {
    r = fastReadoutFrom(seq, plan, { kind: "cells", stream }, tolerance, split, (executor.threads ?? 2) >= 2);
    if (typeof r === "string") break;
    est = r.report.estimate?.relL2 ?? 0;
    if (est <= tolerance) break;
  }
  await new Promise((res) => setTimeout(res, 0));
  if (opts.signal?.aborted) throw new AbortedError();
  if (typeof r === "string") {
    // the spoiled operator does not apply (e.g. EPI's alternating readouts): the stored isochromats go where
    // simulateWith sends them — the time-segmented fold where it is asked for or predicted cheaper, else direct
    const res = await storedWith(opts);
    // (where the fold's own prediction chose the direct readout, that choice stands: the spoiled operator's did not apply)
    return {
      ...res,
      readout: res.readout.operator === "direct"
        ? { ...res.readout, requested, fallback: res.readout.fallback ?? r, ...auto, ...(res.readout.foldPredicted ? { choice: res.readout.choice } : {}) }
        : res.readout,
    };
  }
  if (!(est <= tolerance)) {
    const fallback = `the fast operator's a-posteriori error estimate ${est.toExponential(2)} exceeded the tolerance ${tolerance} at the tightest truncation`;
    const res = await storedWith({ ...opts, readout: "direct" });
    return { ...res, readout: { ...res.readout, requested, fallback, ...auto } };
  }
  Object.assign(r.report, { requested, weights: "streamed from the sampled cells (no isochromat stored)" }, auto);
  return { kspace: fastKspace(r, plan, opts), plan, readout: r.report };
}

/** Whether a fast attempt is worth filling the RF maps for on this thread first. */
export function fastWanted(seq: Sequence, iso: IsochromatSet, plan: EnginePlan, opts: FastOptions): boolean {
  return !opts.general && fastPrecheck(plan) === null && resolveReadout(seq, plan, iso, opts.readout ?? "auto", opts.tolerance ?? DEFAULT_TOLERANCE).use === "fast";
}

/** The report of a direct run when the fast operator was asked for but not tried. */
export function directReason(plan: EnginePlan, opts: FastOptions, r: ReadoutReport): ReadoutReport {
  const fallback = opts.general
      ? "the general path was forced (general: true)"
      : fastPrecheck(plan) ?? "direct operator";
  return { ...r, requested: "fast", fallback };
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
export async function simulateWith(executor: Executor, seq: Sequence, iso: IsochromatSet, opts: RunOptions): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }> {
  const shared = shareEngineArrays(iso);
  const plan = planLayout(seq, shared, opts);
  opts.onPlan?.(plan);
  // the fast operator runs on this thread (no engine workers started; it may share its FFTs with its own helper thread, fast-node.ts)
  let readout: ReadoutReport;
  let filled = false;
  if (fastWanted(seq, shared, plan, opts)) {
    filled = true;
    fillRfMaps(plan, 0, plan.classes);
    if (opts.signal?.aborted) throw new AbortedError();
    const f = tryFast(seq, shared, plan, { ...opts, threads: executor.threads });
    // let a pending interrupt (SIGINT) arrive before the result is used
    await new Promise((r) => setTimeout(r, 0));
    if (opts.signal?.aborted) throw new AbortedError();
    if (f.kspace) return { kspace: f.kspace, plan, readout: f.readout };
    readout = f.readout;
  } else {
    readout = tryFast(seq, shared, plan, opts.readout === "fast" ? { ...opts, readout: "direct" } : opts).readout;
    if (opts.readout === "fast") readout = directReason(plan, opts, readout);
  }
  // the time-segmented fold of the readout (fold.ts) for plans the general path plays
  const tolerance = opts.tolerance ?? DEFAULT_TOLERANCE;
  const fold = chooseFold(seq, shared, plan, opts, readout, tolerance);
  readout = fold.report;
  // the fold runs every chunk, a shard's too (its partials are not k-space block sums: the whole fold is finished and
  // block 0 carries it, as for the fast operator); the direct readout runs the shard's blocks
  const runAll = async (whole: boolean): Promise<{ re: Float64Array; im: Float64Array }> => {
    const [c0, c1] = whole ? [0, plan.chunks] : chunkRange(plan, opts.blocks);
    const session = executor.open(plan, shared, Math.max(1, c1 - c0, plan.classes >= PARALLEL_RF_CLASSES ? Infinity : 1));
    try {
      if (filled) { /* filled for the fast attempt (or the fold's first pass) */ }
      else if (plan.classes >= PARALLEL_RF_CLASSES && session.size > 1) await session.fillRfMaps(plan.classes, opts.signal);
      else fillRfMaps(plan, 0, plan.classes);
      filled = true;
      const size = partialLength(plan);
      const re = new Float64Array(size), im = new Float64Array(size);
      const summer = new BlockSummer(size, c0, c1, (b, bre, bim) => {
        if (!whole) opts.onBlock?.(b, bre, bim);
        addInto(re, im, bre, bim);
      });
      let done = 0;
      await session.runChunks(c0, c1, (c, pr, pi) => {
        summer.add(c, pr, pi);
        opts.onProgress?.(++done, c1 - c0);
      }, () => summer.waitingFor, opts.signal);
      if (!summer.done) throw new Error("engine: not every chunk arrived");
      return { re, im };
    } finally {
      await session.close();
    }
  };
  if (fold.spec) {
    plan.fold = fold.spec;
    const y = await runAll(true);
    const f = foldFinish(plan, y.re, y.im, shared, tolerance);
    plan.fold = null;
    if (f.estimate.relL2 <= tolerance) {
      const report = { ...readout, estimate: f.estimate };
      return { kspace: wholeKspace(f.re, f.im, plan, opts, report, "folded"), plan, readout: report };
    }
    readout = foldRejected(readout, f.estimate.relL2, tolerance);
  }
  const k = await runAll(false);
  return { kspace: { coils: plan.coils, rows: plan.rows, read: plan.read, re: k.re, im: k.im }, plan, readout };
}
