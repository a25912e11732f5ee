/**
 * Wires the stages for one run: protocol → phantom → sequence →
 * isochromats → engine → recon → analysis → run folder. No physics here.
 */
import { createRequire } from "node:module";
import { resolve } from "node:path";
import { UserError } from "../errors.js";
import { loadProtocol, logicalAxes, type Protocol } from "../protocol/index.js";
import { loadPhantom } from "../phantom/index.js";
import { buildSequence, type Sequence } from "../sequence/index.js";
import { makeIsochromats, defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet } from "../isochromats/index.js";
import { blockChunks, blockCount, BLOCK_CHUNKS, shardBlocks, simulateParallel, type EnginePlan, type KSpace } from "../engine/index.js";
import { countChunks } from "../engine/plan.js";
import { checkMemory, defaultMemoryLimit, defaultWorkers, estimateMemory } from "./memory.js";
import { inputHash, writePartial } from "./partial.js";
import { reconstructCartesian, magnitude } from "../recon/reconstruct.js";
import { writeRunFolder, type Volume } from "../io/run-folder.js";
import { FFT_CONVENTION_TEXT } from "../recon/convention.js";
import { Progress } from "./progress.js";

export const SAFETY_NOTE =
  "isofold is not a medical device. It does not model RF heating (SAR), peripheral nerve stimulation or acoustic noise; " +
  "defer to the scanner's own safety system, local regulations and licensed practice.";

export function version(): string {
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
  /** Engine worker threads (default: available cores). */
  workers?: number;
  /** Run only shard i of n (0 ≤ i < n) and write a partial k-space instead of a run folder. */
  shard?: [number, number];
  /** Memory limit in bytes for the estimate check (default 80 % of total memory). */
  maxMemory?: number;
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
  seq: Sequence;
  o: RunOptions;
  isoSummary: { count: number; columns: number; warnings: string[] };
  engine: { chunks: number; rfClasses: number; ops: number; workers: number; shards?: number };
}

/** Loads and checks every input; throws UserError before any work or file. */
export function prepare(o: RunOptions): { protocol: Protocol; seq: Sequence; iso: IsochromatSet; phantomFile: string } {
  const protocol = loadProtocol(o.protocol, o.sets);
  let seq: Sequence;
  try {
    seq = buildSequence(protocol);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(o.protocol);
    throw e;
  }
  const phantom = loadPhantom(o.phantom, protocol.field);
  const axes = logicalAxes(protocol);
  const geo = {
    axes,
    dx: protocol.fov.read / protocol.matrix.read,
    dy: protocol.fov.phase / protocol.matrix.phase,
    thickness: protocol.slice.thickness,
    position: protocol.slice.position,
    clipRead: protocol.fov.read * protocol.oversampling.read,
    clipPhase: 1.5 * protocol.fov.phase * (1 + protocol.oversampling.phase),
  };
  checkMemory(estimateMemory(phantom, geo, protocol.field, o.iso, seq, o.workers ?? defaultWorkers()), o.maxMemory ?? defaultMemoryLimit(), o.iso);
  const iso = makeIsochromats(phantom, geo, protocol.field, o.iso);
  if (iso.count === 0) {
    throw new UserError(`no part of the phantom lies in the slice at ${(protocol.slice.position * 1e3).toFixed(1)} mm; move slice.position`, o.protocol, "slice.position");
  }
  iso.warnings.push(...phantom.warnings);
  return { protocol, seq, iso, phantomFile: o.phantom };
}

function voxelAffine(p: Protocol, sliceThicknessMm: number): number[][] {
  const ax = logicalAxes(p);
  const dx = (p.fov.read / p.matrix.read) * 1e3, dy = (p.fov.phase / p.matrix.phase) * 1e3;
  const cr = Math.floor(p.matrix.read / 2), cp = Math.floor(p.matrix.phase / 2);
  const pos = p.slice.position * 1e3;
  const rows: number[][] = [];
  for (let k = 0; k < 3; k++) {
    const a = ax.read[k]! * dx, b = ax.phase[k]! * dy, c = ax.slice[k]! * sliceThicknessMm;
    rows.push([a, b, c, -cr * a - cp * b + ax.slice[k]! * pos]);
  }
  return rows;
}

/**
 * Runs the engine on a worker pool. Ctrl-C (SIGINT) or SIGTERM stops the
 * workers at once; the promise then rejects with AbortedError and nothing
 * has been written.
 */
async function simulateStage(
  p: { seq: Sequence; iso: IsochromatSet; protocol: Protocol },
  o: RunOptions,
  extra: { blocks?: [number, number]; onBlock?: (b: number, re: Float64Array, im: Float64Array) => void; onPlan?: (plan: EnginePlan) => void },
): Promise<{ kspace: KSpace; plan: EnginePlan }> {
  const progress = new Progress(o.shard ? `simulating shard ${o.shard[0]}/${o.shard[1]}` : "simulating", "iso-TR", o.quiet);
  const trs = p.seq.blocks.filter((b) => b.kind === "rf").length / Math.max(1, p.seq.pulses.length);
  const ac = new AbortController();
  const stop = () => ac.abort();
  process.once("SIGINT", stop);
  process.once("SIGTERM", stop);
  let isoInRange = p.iso.count;
  try {
    return await simulateParallel(p.seq, p.iso, {
      receiverFilter: p.protocol.receiverFilter,
      workers: o.workers ?? defaultWorkers(),
      signal: ac.signal,
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
    });
  } finally {
    progress.done();
    process.off("SIGINT", stop);
    process.off("SIGTERM", stop);
  }
}

/** Reconstructs k-space and writes the run folder (atomically); shared by simulate and merge. */
export function finish(ctx: RunContext, kspace: KSpace, t0: number): RunResult {
  const { protocol, seq, o } = ctx;
  const kv: Volume = { coils: kspace.coils, partitions: seq.kspace.partitions, phase: seq.kspace.phase, read: seq.kspace.read, re: kspace.re, im: kspace.im };
  const img = reconstructCartesian(kv, seq.image);
  const mag = magnitude(img);
  let max = 0;
  for (const v of mag) if (v > max) max = v;
  const seconds = (Date.now() - t0) / 1000;
  const axes = logicalAxes(protocol);
  const report: Record<string, unknown> = {
    tool: { name: "isofold", version: version() },
    created: new Date().toISOString(),
    safety: SAFETY_NOTE,
    seed: o.seed,
    inputs: { phantom: resolve(o.phantom), protocol: o.protocol, set: o.sets },
    protocol: { ...protocol, units: "SI: s, m, T, T/m, T/m/s, Hz, rad" },
    sequence: { name: seq.name, timing: seq.timing, derived: seq.derived },
    geometry: {
      read: axes.names.read, phase: axes.names.phase, slice: axes.names.slice,
      frame: "phantom coordinates are RAS+ (x toward the subject's right, y anterior, z superior)",
    },
    axes: {
      kspace: ["coil", "partition", "phase", "read"],
      image: ["coil", "partition", "phase", "read"],
      index: "index n along an axis of N points sits at (n − floor(N/2))·Δ along the positive physical direction named in geometry",
      png: "image.png and kspace.png: readout horizontal (left → right = increasing index), phase vertical (top row = index 0)",
    },
    fftConvention: FFT_CONVENTION_TEXT,
    isochromats: {
      count: ctx.isoSummary.count, columns: ctx.isoSummary.columns, density: o.iso.density, sliceCount: o.iso.sliceCount,
      sliceExtent: o.iso.sliceExtent, fatModel: o.iso.fatModel,
      note: "T2* beyond T2 is not yet modelled by an intravoxel frequency spread; signal decays with T2 plus any B0 the phantom defines",
    },
    engine: {
      ...ctx.engine,
      order: `chunk partials summed in chunk order within blocks of ${BLOCK_CHUNKS} chunks, block sums in block order: bitwise the same for any number of workers or shards`,
    },
    measurements: { imageMax: max },
    timingSeconds: seconds,
    warnings: ctx.isoSummary.warnings,
  };
  const files = writeRunFolder(o.out, {
    kspace: kv,
    image: { coils: kspace.coils, ...img },
    affine: voxelAffine(protocol, protocol.slice.thickness * 1e3),
    voxelMm: [(protocol.fov.read / protocol.matrix.read) * 1e3, (protocol.fov.phase / protocol.matrix.phase) * 1e3, protocol.slice.thickness * 1e3],
    report,
  });
  return { dir: o.out, files, seconds, report };
}

/** One run: prepare, simulate on the worker pool, then the run folder — or, with o.shard, a partial k-space. */
export async function run(o: RunOptions): Promise<RunResult> {
  const t0 = Date.now();
  const p = prepare(o);
  const workers = o.workers ?? defaultWorkers();
  if (o.shard) return runShard(p, o, t0);
  const { kspace, plan } = await simulateStage(p, o, {});
  const ctx: RunContext = {
    protocol: p.protocol, seq: p.seq, o,
    isoSummary: { count: p.iso.count, columns: p.iso.columns, warnings: p.iso.warnings },
    engine: { chunks: plan.chunks, rfClasses: plan.classes, ops: plan.ops.length, workers },
  };
  return finish(ctx, kspace, t0);
}

async function runShard(p: ReturnType<typeof prepare>, o: RunOptions, t0: number): Promise<RunResult> {
  const [i, n] = o.shard!;
  const total = blockCount(countChunks(p.iso));
  const blocks = shardBlocks(total, i, n);
  const nb = blocks[1] - blocks[0];
  let bre = new Float64Array(0), bim = new Float64Array(0);
  const { kspace, plan } = await simulateStage(p, o, {
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
    shape: [nb, kspace.coils, p.seq.kspace.partitions, p.seq.kspace.phase, p.seq.kspace.read],
    re: bre, im: bim,
    inputHash: inputHash(p.protocol, o),
    inputs: { phantom: resolve(o.phantom), protocol: o.protocol, sets: o.sets, seed: o.seed, iso: o.iso },
    protocol: p.protocol,
    isoSummary: { count: p.iso.count, columns: p.iso.columns, warnings: p.iso.warnings },
    engine: { chunks: plan.chunks, rfClasses: plan.classes, ops: plan.ops.length, workers: o.workers ?? defaultWorkers() },
  });
  return { dir: o.out, files, seconds: (Date.now() - t0) / 1000, report: {} };
}

export { defaultIsochromatOptions };
