/**
 * The command line's side of a run: reads the input files, calls the
 * library's simulate() (src/api.ts) with the Node worker pool, and writes the
 * run folder — or, with --shard, runs a block range and writes a partial
 * k-space. No physics here.
 */
import { createRequire } from "node:module";
import { resolve } from "node:path";
import { UserError } from "../errors.js";
import type { Protocol } from "../protocol/index.js";
import type { Phantom } from "../phantom/index.js";
import type { Sequence } from "../sequence/index.js";
import { defaultIsochromatOptions, type IsochromatCells, type IsochromatOptions, type IsochromatSet } from "../isochromats/index.js";
import { blockChunks, blockCount, shardBlocks, nodeExecutor, simulateCells, type EnginePlan, type KSpace, type ReadoutReport } from "../engine/node.js";
import { countChunks } from "../engine/plan.js";
import { nodePhaseHelper } from "../engine/fast-node.js";
import {
  assembleResult, prepareSimulation, simulate, spreadSummary, isoOptionsFor, tissueReport, voxelAffine, SAFETY_NOTE,
  sampledLimits, slabCoverage, pathwayOrder, profileReach, type IsoSampling,
  type EngineSummary, type IsochromatSummary, type SimulateInput, type SimulateResult, type SliceRun,
} from "../api.js";
import { checkMemory, defaultMemoryLimit, defaultWorkers, estimateMemory } from "./memory.js";
import { inputHash, writePartial } from "./partial.js";
import { startRunFolderPlots, writeRunFolder } from "../io/run-folder.js";
import { checkProtocol, type CheckResult } from "../check/index.js";
import type { CheckItem as ReportCheckItem, LogicalRect } from "../report/index.js";
import { fatCentroid, truthFiles } from "./effects.js";
import { displayTransform, type PlotRenderer } from "../report/index.js";
import { logicalAxes } from "../protocol/index.js";
import { loadPhantom, loadProtocol, readRealNpy } from "./inputs.js";
import { chunkIsochromatsFromEnv, wasmFromEnv } from "./options.js";
import { Progress } from "./progress.js";
import { closePlotWorker, plotRenderer } from "./plots.js";

export { SAFETY_NOTE, isoOptionsFor, voxelAffine, readRealNpy, tissueReport, sampledLimits, slabCoverage, pathwayOrder, profileReach, type IsoSampling, type SliceRun };

/**
 * Prints each warning of a run on stderr, one line each, prefixed "warning:"
 * (also with --quiet: -q silences progress only). Duplicates print once.
 */
export function printWarnings(warnings: readonly string[]): void {
  for (const w of new Set(warnings)) process.stderr.write(`warning: ${w}\n`);
}

let packageVersion: string | null = null;

/** isofold's version from package.json (read once per process). */
export function version(): string {
  return (packageVersion ??= readVersion());
}

function readVersion(): string {
  const require = createRequire(import.meta.url);
  for (const p of ["../../package.json", "../../../package.json"]) {
    try {
      return (require(p) as { version: string }).version;
    } catch {
      /* try the next */
    }
  }
  return "unknown";
}

export interface RunOptions {
  phantom: string;
  protocol: string;
  sets: string[];
  out: string;
  seed: number;
  iso: IsochromatOptions;
  quiet?: boolean;
  /** Leave the run's warnings to the caller (in the result's report) instead of printing them (sweep). */
  keepWarnings?: boolean;
  /** Changes the loaded phantom before it is sampled (dataset perturbations). */
  phantomTransform?: (ph: Phantom) => Phantom;
  /** Also write the ground-truth maps (truth-*.png / .npy). */
  truth?: boolean;
  /** Engine worker threads (default: available cores). */
  workers?: number;
  /** Run only shard i of n (0 ≤ i < n) and write a partial k-space instead of a run folder. */
  shard?: [number, number];
  /** Memory limit in bytes for the estimate check (default 80 % of total memory). */
  maxMemory?: number;
  /** Receive coils the engine carries per isochromat, for the memory estimate (default 1: the uniform coil). */
  memoryCoils?: number;
  /** Run the a-posteriori through-slice convergence check (default true). */
  convergenceCheck?: boolean;
  /** Readout operator (default auto: the cheaper by predicted cost; fast falls back to direct where it does not apply) and its tolerance (relative L2 of k-space, default 1e-6). */
  readout?: "auto" | "fast" | "direct";
  tolerance?: number;
  /** Receive coils (simulate --coils): runs the engine instead of the single uniform coil; its k-space is the uniform coil's, its files and report join the run folder. */
  coilRun?: (sl: { seq: Sequence; cells: IsochromatCells; readonly iso: IsochromatSet; protocol: Protocol }) => Promise<{ kspace: KSpace; plan: EnginePlan; readout?: ReadoutReport[]; files: Map<string, Uint8Array>; report: Record<string, unknown> }>;
}

export interface RunResult {
  dir: string;
  files: string[];
  seconds: number;
  report: Record<string, unknown>;
}

/** What the run folder needs besides k-space: enough to rebuild it in a merge. */
export interface RunContext {
  protocol: Protocol;
  o: RunOptions;
  phantom: Phantom;
  /** Sequence of each engine run (one per slice, or one for a 3D slab), in spatial order. */
  seqs: Sequence[];
  isoSummary: IsochromatSummary;
  engine: EngineSummary;
  /** Files and report of simulate --coils. */
  coils?: { files: Map<string, Uint8Array>; report: Record<string, unknown> };
}

/** The library input of a command-line run: files read here, everything else passed through. */
export function libraryInput(o: RunOptions): SimulateInput {
  const protocol = loadProtocol(o.protocol, o.sets);
  const phantom = loadPhantom(o.phantom, protocol.field, { readArray: readRealNpy });
  const workers = o.workers ?? defaultWorkers();
  return {
    parsedProtocol: protocol, parsedPhantom: phantom, sets: o.sets, protocolName: o.protocol, phantomName: o.phantom,
    phantomTransform: o.phantomTransform, iso: o.iso, seed: o.seed, workers, convergenceCheck: o.convergenceCheck,
    readout: o.readout, tolerance: o.tolerance,
    ...(o.coilRun ? { runEngine: o.coilRun } : {}),
    chunkIsochromats: chunkIsochromatsFromEnv(), wasm: wasmFromEnv(),
    beforeIsochromats: (e) => {
      const at = (iso: IsochromatOptions) => estimateMemory(e.phantom, e.geo, e.fieldT, iso, e.seq, workers, o.memoryCoils ?? 1, !e.stored);
      checkMemory(at(e.iso), o.maxMemory ?? defaultMemoryLimit(), e.asked, (change) => at(e.isoFor(change)));
    },
    inputs: { phantom: resolve(o.phantom), protocol: o.protocol, set: o.sets },
    version: version(),
  };
}

/** Loads and checks every input; throws UserError before any work or file. */
export function prepare(o: RunOptions): {
  protocol: Protocol; seq: Sequence; readonly iso: IsochromatSet; cells: IsochromatCells; phantomFile: string; slices: SliceRun[]; phantom: Phantom; sampling: IsoSampling;
} {
  const p = prepareSimulation(libraryInput(o));
  const first = p.first;
  // the isochromats are made on first use (SliceRun.iso): the streamed fast operator needs only the cells
  return {
    protocol: p.protocol, seq: first.seq, cells: first.cells, phantomFile: o.phantom, slices: p.slices, phantom: p.phantom, sampling: p.sampling,
    get iso() {
      return first.iso;
    },
  };
}

/** Ctrl-C (SIGINT) or SIGTERM aborts the returned signal while `body` runs; the engine then stops its workers at once. */
async function interruptible<T>(body: (signal: AbortSignal) => Promise<T>): Promise<T> {
  const ac = new AbortController();
  const stop = () => ac.abort();
  process.once("SIGINT", stop);
  process.once("SIGTERM", stop);
  try {
    return await body(ac.signal);
  } finally {
    process.off("SIGINT", stop);
    process.off("SIGTERM", stop);
  }
}
/**
 * Runs the engine on a worker pool. Ctrl-C (SIGINT) or SIGTERM stops the
 * workers at once; the promise then rejects with AbortedError and nothing
 * has been written.
 */
async function simulateStage(
  p: { seq: Sequence; readonly iso: IsochromatSet; cells: IsochromatCells; protocol: Protocol },
  o: RunOptions,
  extra: {
    blocks?: [number, number]; onBlock?: (b: number, re: Float64Array, im: Float64Array) => void; onPlan?: (plan: EnginePlan) => void;
    label?: string;
  },
): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }> {
  const label = extra.label ?? (o.shard ? `simulating shard ${o.shard[0]}/${o.shard[1]}` : "simulating");
  const progress = new Progress(label, "iso-TR", o.quiet);
  const trs = p.seq.blocks.filter((b) => b.kind === "rf").length / Math.max(1, p.seq.pulses.length);
  let isoInRange = p.cells.count;
  try {
    return await interruptible((signal) => simulateCells(nodeExecutor(o.workers ?? defaultWorkers()), p.seq, p.cells, () => p.iso, {
      receiverFilter: p.protocol.receiverFilter,
      chunkIsochromats: chunkIsochromatsFromEnv(), wasm: wasmFromEnv(),
      readout: o.readout, tolerance: o.tolerance,
      signal,
      blocks: extra.blocks,
      onBlock: extra.onBlock,
      onPlan: (plan) => {
        extra.onPlan?.(plan);
        if (extra.blocks) {
          const [c0, c1] = blockChunks(plan.chunks, extra.blocks[0], extra.blocks[1]);
          isoInRange = plan.chunkStart[c1]! - plan.chunkStart[c0]!;
        }
      },
      onProgress: (d, t) => progress.update(d, t, (isoInRange * trs * d) / t),
    }));
  } finally {
    progress.done();
  }
}

/** One run: simulate() on the worker pool, then the run folder — or, with o.shard, a partial k-space. */
export async function run(o: RunOptions): Promise<RunResult> {
  const t0 = Date.now();
  if (o.shard) {
    const p = prepare(o);
    if (p.slices.length > 1) {
      throw new UserError(`--shard splits one engine run; this protocol has ${p.slices.length} slices: run each slice (slice.position) as its own sharded job, or use slices.count 1`, o.protocol, "slices.count");
    }
    return runShard(p, o, t0);
  }
  const input = libraryInput(o);
  // report.html's plots on a worker thread: it loads vega while the run samples and simulates
  const plots = plotRenderer(input.workers!);
  // the fast readout operator's helper thread (engine/fast-node.ts) starts now, so that it is up when the
  // engine gets there; below about 128² the operator runs without it (fast.ts PARALLEL_PHASE_WORK)
  const m = input.parsedProtocol!.matrix;
  if (o.readout !== "direct" && !o.coilRun && input.workers! >= 2 && m.read * m.phase >= 128 * 128) nodePhaseHelper();
  let progress: Progress | null = null;
  let current = -1;
  let r: SimulateResult;
  try {
    r = await interruptible((signal) => simulate({
      ...input, signal, executor: nodeExecutor(input.workers!),
      onProgress: (e) => {
        if (e.slice !== current) {
          progress?.done();
          current = e.slice;
          progress = new Progress(e.slices > 1 ? `simulating slice ${e.slice + 1}/${e.slices}` : "simulating", "iso-TR", o.quiet);
        }
        progress!.update(e.done, e.total, e.isochromatTRs);
      },
    }));
  } catch (e) {
    if (plots) closePlotWorker();
    throw e;
  } finally {
    (progress as Progress | null)?.done();
  }
  return write(o, r, t0, plots);
}

/**
 * The closed-form check of the run's protocol for report.html: its verdict
 * lines first on the page, and where folded signal lands (along phase and
 * read, in the image frame: index n of N at (n − ⌊N/2⌋)·Δ) as an overlay on
 * the simulated image. The check is an addition to the page: where it cannot
 * judge a run, the page goes without it and says so in report.json's notes.
 */
function checkOverlay(r: SimulateResult): { checks?: ReportCheckItem[]; folds?: LogicalRect[] } {
  const p = r.protocol, seq = r.sequences[Math.floor(r.sequences.length / 2)]!;
  let c: CheckResult;
  try {
    c = checkProtocol(r.phantom, p, seq, {});
  } catch (e) {
    const notes = (r.report["notes"] as string[] | undefined) ?? [];
    notes.push(`report.html: no closed-form check for this run (${e instanceof Error ? e.message : String(e)})`);
    r.report["notes"] = notes;
    return {};
  }
  const dRead = p.fov.read / p.matrix.read, dPhase = p.fov.phase / p.matrix.phase;
  const whole = (n: number, d: number): [number, number] => [(-Math.floor(n / 2) - 0.5) * d, (n - Math.floor(n / 2) - 0.5) * d];
  // one band per side the signal leaves from: the union of its shapes' landing ranges
  const bands = (w: CheckResult["wrap"]["phase"]): { label: string; range: [number, number] }[] => {
    const by = new Map<string, { n: number; lo: number; hi: number }>();
    for (const f of w.folded) {
      if (!f.landsM) continue;
      const b = by.get(f.from) ?? { n: 0, lo: Infinity, hi: -Infinity };
      by.set(f.from, { n: b.n + 1, lo: Math.min(b.lo, f.landsM[0]), hi: Math.max(b.hi, f.landsM[1]) });
    }
    return [...by].map(([from, b]) => ({ label: `folded from ${from} (${b.n} shape${b.n > 1 ? "s" : ""})`, range: [b.lo, b.hi] }));
  };
  const folds: LogicalRect[] = [
    ...bands(c.wrap.phase).map((b) => ({ label: b.label, read: whole(p.matrix.read, dRead), phase: b.range })),
    ...bands(c.wrap.read).map((b) => ({ label: b.label, read: b.range, phase: whole(p.matrix.phase, dPhase) })),
  ];
  const checks = c.items.map((it) => ({ key: it.key, label: it.label, value: it.value, unit: it.unit, verdict: it.verdict, threshold: it.threshold.text, reason: it.reason }));
  // report.json `checks`: the same lines keyed by check (checks.<key>.value in .unit, .verdict, …), the keys the previewer's numbers carry
  r.report["checks"] = Object.fromEntries(checks.map(({ key, ...line }) => [key, line]));
  return { checks, folds };
}

/** Writes the run folder of a result (atomically): PNGs in display orientation, truth maps and coil files when asked. */
async function write(o: RunOptions, r: SimulateResult, t0: number, plots?: PlotRenderer): Promise<RunResult> {
  const p = r.protocol;
  const dRead = p.fov.read / p.matrix.read, dPhase = p.fov.phase / p.matrix.phase;
  // the plots go to their thread first, before the closed-form check and the files
  const started = plots ? startRunFolderPlots(r, plots) : undefined;
  const files = await writeRunFolder(o.out, {
    extra: o.truth || r.coilFiles ? new Map([...(o.truth ? truthFiles(r.truth, displayTransform(logicalAxes(p))) : []), ...(r.coilFiles ?? [])]) : undefined,
    fatCentroid: fatCentroid(r.truth, dRead, dPhase),
    ...checkOverlay(r),
    kspace: r.kspace, image: r.image, magnitude: r.magnitude, affine: r.affine, voxelMm: r.voxelMm, report: r.report, plots, started,
  });
  if (!o.keepWarnings) printWarnings(r.warnings);
  return { dir: o.out, files, seconds: (Date.now() - t0) / 1000, report: r.report };
}

async function runShard(p: ReturnType<typeof prepare>, o: RunOptions, t0: number): Promise<RunResult> {
  const [i, n] = o.shard!;
  const total = blockCount(countChunks(p.cells, chunkIsochromatsFromEnv()));
  const blocks = shardBlocks(total, i, n);
  const nb = blocks[1] - blocks[0];
  let bre = new Float64Array(0), bim = new Float64Array(0);
  const { kspace, plan, readout } = await simulateStage(p, o, {
    blocks,
    onPlan: (plan) => {
      const size = plan.coils * plan.rows * plan.read;
      bre = new Float64Array(nb * size);
      bim = new Float64Array(nb * size);
    },
    onBlock: (b, re, im) => {
      bre.set(re, (b - blocks[0]) * re.length);
      bim.set(im, (b - blocks[0]) * im.length);
    },
  });
  const files = writePartial(o.out, {
    shard: [i, n], blocks, totalBlocks: total, chunks: plan.chunks,
    shape: [nb, kspace.coils, p.seq.kspace.slice, p.seq.kspace.phase, p.seq.kspace.read],
    re: bre, im: bim,
    inputHash: inputHash(p.protocol, o),
    inputs: { phantom: resolve(o.phantom), protocol: o.protocol, sets: o.sets, seed: o.seed, iso: o.iso, truth: o.truth === true },
    protocol: p.protocol,
    isoSummary: { count: p.cells.count, columns: p.cells.columns, warnings: p.cells.warnings, spreads: spreadSummary(p.cells), sampling: p.sampling, extent: p.cells.extent, notes: p.cells.notes },
    engine: { chunks: plan.chunks, rfClasses: plan.classes, ops: plan.ops.length, workers: o.workers ?? defaultWorkers(), readout },
  });
  if (!o.keepWarnings) printWarnings([...p.protocol.warnings, ...p.cells.warnings]);
  if (readout.sharding && !o.keepWarnings) {
    // every shard of a fast or folded run computes the whole k-space (same bits as the single run): say what would split it
    process.stderr.write(`note: this shard computed the whole k-space (${/time-segmented fold/.test(readout.method ?? "") ? "the time-segmented fold" : "the fast readout operator"}); ` +
      `sharding divides only the direct readout's work: --readout direct on every shard splits the run (the merge is then the unsharded direct run's bytes)\n`);
  }
  return { dir: o.out, files, seconds: (Date.now() - t0) / 1000, report: {} };
}

/** Reconstructs the k-space of every engine run, stacks them and writes the run folder (atomically); used by merge. */
export function finish(ctx: RunContext, kspaces: KSpace[], t0: number): Promise<RunResult> {
  const { o } = ctx;
  const r = assembleResult({
    protocol: ctx.protocol, phantom: ctx.phantom, seqs: ctx.seqs, iso: o.iso, seed: o.seed,
    inputs: { phantom: resolve(o.phantom), protocol: o.protocol, set: o.sets },
    isoSummary: ctx.isoSummary, engine: ctx.engine, version: version(), t0, ...(ctx.coils ? { coils: ctx.coils } : {}),
  }, kspaces);
  return write(o, r, t0);
}

export { defaultIsochromatOptions };
