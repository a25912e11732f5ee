/**
 * Wires the stages for one run: protocol → phantom → sequence →
 * isochromats → engine → recon → analysis → run folder. No physics here.
 */
import { readFileSync } from "node:fs";
import { createRequire } from "node:module";
import { resolve } from "node:path";
import { UserError } from "../errors.js";
import { loadProtocol, logicalAxes, slicePositions, type Protocol } from "../protocol/index.js";
import { loadPhantom, type Phantom } from "../phantom/index.js";
import { buildSequence, type Sequence } from "../sequence/index.js";
import { makeIsochromats, defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet } from "../isochromats/index.js";
import { blockChunks, blockCount, BLOCK_CHUNKS, shardBlocks, simulateParallel, type EnginePlan, type KSpace, type ReadoutReport } from "../engine/index.js";
import { countChunks } from "../engine/plan.js";
import { checkMemory, defaultMemoryLimit, defaultWorkers, estimateMemory } from "./memory.js";
import { inputHash, writePartial } from "./partial.js";
import { toGrid, reconstructGrid, magnitude, type ComplexVolume } from "../recon/reconstruct.js";
import { writeRunFolder, type Volume } from "../io/run-folder.js";
import { FFT_CONVENTION_TEXT } from "../recon/convention.js";
import { decodeNpy } from "../io/npy.js";
import { fatCentroid, fatShiftReport, truthFiles } from "./effects.js";
import { displayTransform } from "../report/index.js";
import { Progress } from "./progress.js";
import { samplingRemarks } from "./sampling.js";

export const SAFETY_NOTE =
  "isofold is not a medical device. It does not model RF heating (SAR), peripheral nerve stimulation or acoustic noise; " +
  "defer to the scanner's own safety system, local regulations and licensed practice.";

/**
 * Prints each warning of a run on stderr, one line each, prefixed "warning:"
 * (also with --quiet: -q silences progress only). Duplicates print once.
 */
export function printWarnings(warnings: readonly string[]): void {
  for (const w of new Set(warnings)) process.stderr.write(`warning: ${w}\n`);
}

/**
 * The tissues of a run with their values (SI) and where each value comes from:
 * library tissues give the status of each value (checked against the source,
 * recalled from memory, estimated by a rule, our own design value).
 */
export function tissueReport(phantom: Phantom): Record<string, unknown>[] {
  return phantom.tissues.map((t) => ({
    name: t.name, pd: t.pd, t1: t.t1, t2: t.t2, t2star: t.t2star, fatFraction: t.fatFraction,
    source: t.source ?? "given in the phantom file",
  }));
}

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
  /** Readout operator (default fast, falling back to direct where it does not apply) and its tolerance (relative L2 of k-space, default 1e-6). */
  readout?: "fast" | "direct";
  tolerance?: number;
  /** Receive coils (simulate --coils): runs the engine instead of the single uniform coil; its k-space is the uniform coil's, its files and report join the run folder. */
  coilRun?: (sl: { seq: Sequence; iso: IsochromatSet; protocol: Protocol }) => Promise<{ kspace: KSpace; plan: EnginePlan; files: Map<string, Uint8Array>; report: Record<string, unknown> }>;
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
  isoSummary: { count: number; columns: number; warnings: string[]; spreads: { tissue: string; t2prime: number | null; isochromats: number }[] };
  engine: { chunks: number; rfClasses: number; ops: number; workers: number; shards?: number; runs?: number; readout?: ReadoutReport | ReadoutReport[] };
  /** Files and report of simulate --coils. */
  coils?: { files: Map<string, Uint8Array>; report: Record<string, unknown> };
}

/** One slice (or the 3D slab) to simulate: its sequence and isochromats. */
export interface SliceRun {
  position: number;
  seq: Sequence;
  iso: IsochromatSet;
}

/**
 * Isochromat options for a protocol. A crusher or spoiler of c cycles across
 * the slice is only simulated faithfully when the through-slice isochromats
 * resolve it: with n isochromats per thickness, Σ exp(i2π·c·w/thickness)
 * vanishes only if c·m/n is not a whole number for the pathway orders m that
 * matter, so n ≥ 4c + 1 with refocusing pulses (echo-train pathways mix up to
 * ~4 crusher orders) and n ≥ 2c + 1 with non-ideal spoiling.
 * 3D: the through-slab grid covers M slice-encoding steps (the N of the slab plus a
 * margin of ⌈N/8⌉ on each side for the slab profile's skirts, which then wrap
 * along slice-encoding steps as on a scanner), at least `density` isochromats per
 * slice-encoding step, weighted per slice-encoding step thickness.
 */
export function isoOptionsFor(p: Protocol, iso: IsochromatOptions): IsochromatOptions {
  const refocused = p.sequence === "se" || p.sequence === "rare" || (p.sequence === "epi" && p.epiEcho === "spin");
  let perThk = 0;
  if (refocused) perThk = Math.max(perThk, 4 * Math.ceil(p.crusherCycles) + 1);
  if (p.spoiling !== "ideal" && p.sequence !== "bssfp") perThk = Math.max(perThk, 2 * Math.ceil(p.spoilerCycles) + 1);
  if (p.sequence !== "gre3d") {
    return { ...iso, sliceCount: Math.max(iso.sliceCount, Math.ceil(perThk * iso.sliceExtent)) };
  }
  const n = p.matrix.slice;
  const m = n + 2 * Math.ceil(n / 8);
  const per = Math.max(iso.density, perThk);
  return { ...iso, sliceCount: m * per, sliceExtent: m };
}

/** Loads and checks every input; throws UserError before any work or file. */
export function prepare(o: RunOptions): {
  protocol: Protocol; seq: Sequence; iso: IsochromatSet; phantomFile: string; slices: SliceRun[]; phantom: Phantom;
} {
  const protocol = loadProtocol(o.protocol, o.sets);
  const ms = slicePositions(protocol);
  const loaded = loadPhantom(o.phantom, protocol.field, { readArray: readRealNpy });
  const phantom = o.phantomTransform ? o.phantomTransform(loaded) : loaded;
  const axes = logicalAxes(protocol);
  const isoOpts = { ...isoOptionsFor(protocol, o.iso), offsetHz: protocol.shim };
  const raised = protocol.sequence !== "gre3d" && isoOpts.sliceCount > o.iso.sliceCount
    ? `through-slice isochromats raised from ${o.iso.sliceCount} to ${isoOpts.sliceCount} so the ${protocol.crusherCycles}-cycle crushers / ${protocol.spoilerCycles}-cycle spoilers are resolved`
    : null;
  const remarks = samplingRemarks(phantom, protocol, o.iso.density);
  const slices: SliceRun[] = [];
  for (const position of ms.positions) {
    const p = { ...protocol, slice: { ...protocol.slice, position } };
    let seq: Sequence;
    try {
      seq = buildSequence(p);
    } catch (e) {
      if (e instanceof UserError) throw e.inFile(o.protocol);
      throw e;
    }
    if (ms.positions.length > 1 && ms.positions.length * seq.activeTime > protocol.tr + 1e-9) {
      const maxN = Math.floor((protocol.tr + 1e-9) / seq.activeTime);
      throw new UserError(
        `${ms.positions.length} slices of ${(seq.activeTime * 1e3).toFixed(2)} ms each do not fit in tr ${(protocol.tr * 1e3).toFixed(2)} ms; ` +
          `set tr to at least ${(Math.ceil(ms.positions.length * seq.activeTime * 1e5) / 1e2).toFixed(2)} ms or slices.count to at most ${maxN}`,
        o.protocol, "slices.count",
      );
    }
    const geo = {
      axes,
      dx: protocol.fov.read / protocol.matrix.read,
      dy: protocol.fov.phase / protocol.matrix.phase,
      thickness: protocol.slice.thickness,
      position,
      clipRead: protocol.fov.read * protocol.oversampling.read,
      clipPhase: 1.5 * protocol.fov.phase * (1 + protocol.oversampling.phase),
    };
    // slices run one after another: one slice's isochromats and k-space must fit
    if (slices.length === 0) checkMemory(estimateMemory(phantom, geo, protocol.field, isoOpts, seq, o.workers ?? defaultWorkers()), o.maxMemory ?? defaultMemoryLimit(), isoOpts);
    const iso = makeIsochromats(phantom, geo, protocol.field, isoOpts);
    if (iso.count === 0 && ms.positions.length === 1) {
      const fine = remarks.fine.length ? `, or its shapes are finer than the isochromat spacing of ${(remarks.spacing * 1e3).toPrecision(3)} mm and fall between the sample points (raise --density or the matrix)` : "";
      throw new UserError(`no part of the phantom lies in the slice at ${(position * 1e3).toFixed(1)} mm${fine}; move slice.position`, o.protocol, "slice.position");
    }
    if (iso.count === 0) iso.warnings.push(`the slice at ${(position * 1e3).toFixed(1)} mm holds no part of the phantom; its image is empty`);
    iso.warnings.push(...phantom.warnings);
    if (slices.length === 0) iso.warnings.push(...remarks.fine, ...remarks.fov);
    if (raised && slices.length === 0) iso.warnings.push(raised);
    slices.push({ position, seq, iso });
  }
  if (slices.every((sl) => sl.iso.count === 0)) {
    throw new UserError(`no part of the phantom lies in any of the ${slices.length} slices; move slice.position`, o.protocol, "slice.position");
  }
  const first = slices.find((sl) => sl.iso.count > 0)!;
  return { protocol, seq: first.seq, iso: first.iso, phantomFile: o.phantom, slices, phantom };
}

/** Reads a real .npy array (field maps) for the phantom stage. */
export function readRealNpy(path: string): { shape: number[]; data: ArrayLike<number> } {
  let bytes: Uint8Array;
  try {
    bytes = readFileSync(path);
  } catch {
    throw new UserError(`cannot read the file (does it exist?)`, path);
  }
  const a = decodeNpy(bytes, path);
  if (a.dtype === "complex64" || a.dtype === "complex128") throw new UserError(`expected a real array of Hz values, got ${a.dtype}`, path);
  return { shape: a.shape, data: a.data as ArrayLike<number> };
}

/** 3×4 voxel → RAS+ (mm) affine; `spacingMm` and `firstMm` place index 0 and the step along the slice axis. */
export function voxelAffine(p: Protocol, spacingMm: number, firstMm: number): number[][] {
  const ax = logicalAxes(p);
  const dx = (p.fov.read / p.matrix.read) * 1e3, dy = (p.fov.phase / p.matrix.phase) * 1e3;
  const cr = Math.floor(p.matrix.read / 2), cp = Math.floor(p.matrix.phase / 2);
  const rows: number[][] = [];
  for (let k = 0; k < 3; k++) {
    const a = ax.read[k]! * dx, b = ax.phase[k]! * dy, c = ax.slice[k]! * spacingMm;
    rows.push([a, b, c, -cr * a - cp * b + ax.slice[k]! * firstMm]);
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
  extra: {
    blocks?: [number, number]; onBlock?: (b: number, re: Float64Array, im: Float64Array) => void; onPlan?: (plan: EnginePlan) => void;
    label?: string;
  },
): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }> {
  const label = extra.label ?? (o.shard ? `simulating shard ${o.shard[0]}/${o.shard[1]}` : "simulating");
  const progress = new Progress(label, "iso-TR", o.quiet);
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
      readout: o.readout, tolerance: o.tolerance,
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

function spreadSummary(iso: IsochromatSet): RunContext["isoSummary"]["spreads"] {
  return iso.spreads.map((s) => ({ tissue: s.tissue, t2prime: Number.isFinite(s.t2prime) ? s.t2prime : null, isochromats: s.count }));
}

/** One run: prepare, simulate every slice on the worker pool, then the run folder — or, with o.shard, a partial k-space. */
export async function run(o: RunOptions): Promise<RunResult> {
  const t0 = Date.now();
  const p = prepare(o);
  const workers = o.workers ?? defaultWorkers();
  if (o.shard) {
    if (p.slices.length > 1) {
      throw new UserError(`--shard splits one engine run; this protocol has ${p.slices.length} slices: run each slice (slice.position) as its own sharded job, or use slices.count 1`, o.protocol, "slices.count");
    }
    return runShard(p, o, t0);
  }
  // Each slice is its own engine run over its own isochromats, TR shared; cross-talk between slices is not simulated.
  const kspaces: KSpace[] = [];
  let plan: EnginePlan | null = null;
  let coils: RunContext["coils"];
  let count = 0;
  const readouts: ReadoutReport[] = [];
  for (let k = 0; k < p.slices.length; k++) {
    const sl = p.slices[k]!;
    if (sl.iso.count === 0) {
      kspaces.push({ coils: 1, rows: sl.seq.kspace.slice * sl.seq.kspace.phase, read: sl.seq.kspace.read, re: new Float64Array(sl.seq.kspace.slice * sl.seq.kspace.phase * sl.seq.kspace.read), im: new Float64Array(sl.seq.kspace.slice * sl.seq.kspace.phase * sl.seq.kspace.read) });
      continue;
    }
    const label = p.slices.length > 1 ? `simulating slice ${k + 1}/${p.slices.length}` : undefined;
    let res: { kspace: KSpace; plan: EnginePlan; readout?: ReadoutReport };
    if (o.coilRun) {
      const r = await o.coilRun({ seq: sl.seq, iso: sl.iso, protocol: p.protocol });
      coils = { files: r.files, report: r.report };
      res = r;
    } else res = await simulateStage({ seq: sl.seq, iso: sl.iso, protocol: p.protocol }, o, { label });
    plan = res.plan;
    if (res.readout) readouts.push(res.readout);
    count += sl.iso.count;
    kspaces.push(res.kspace);
  }
  const ctx: RunContext = {
    protocol: p.protocol, o, phantom: p.phantom, seqs: p.slices.map((s) => s.seq),
    isoSummary: { count, columns: p.iso.columns, warnings: p.slices.flatMap((s) => s.iso.warnings), spreads: spreadSummary(p.iso) },
    engine: {
      chunks: plan!.chunks, rfClasses: plan!.classes, ops: plan!.ops.length, workers, runs: p.slices.length,
      readout: readouts.length === 0 ? undefined : readouts.length === 1 ? readouts[0]! : readouts,
    },
    ...(coils ? { coils } : {}),
  };
  return finish(ctx, kspaces, t0);
}

async function runShard(p: ReturnType<typeof prepare>, o: RunOptions, t0: number): Promise<RunResult> {
  const [i, n] = o.shard!;
  const total = blockCount(countChunks(p.iso));
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
    isoSummary: { count: p.iso.count, columns: p.iso.columns, warnings: p.iso.warnings, spreads: spreadSummary(p.iso) },
    engine: { chunks: plan.chunks, rfClasses: plan.classes, ops: plan.ops.length, workers: o.workers ?? defaultWorkers(), readout },
  });
  printWarnings([...p.protocol.warnings, ...p.iso.warnings]);
  return { dir: o.out, files, seconds: (Date.now() - t0) / 1000, report: {} };
}

/** Reconstructs the k-space of every engine run, stacks them and writes the run folder (atomically); shared by simulate and merge. */
export async function finish(ctx: RunContext, kspaces: KSpace[], t0: number): Promise<RunResult> {
  const { protocol, o, phantom } = ctx;
  const seq = ctx.seqs[0]!;
  const kParts: ComplexVolume[] = [], iParts: ComplexVolume[] = [];
  kspaces.forEach((k, idx) => {
    const s = ctx.seqs[idx]!;
    const acq = { slice: s.kspace.slice, phase: s.kspace.phase, read: s.kspace.read, re: k.re, im: k.im };
    const grid = toGrid(acq, s.grid);
    kParts.push(grid);
    iParts.push(reconstructGrid(grid, s.grid, s.image));
  });
  const stack = (parts: ComplexVolume[]): Volume => {
    const per = parts[0]!.re.length;
    const re = new Float64Array(per * parts.length), im = new Float64Array(per * parts.length);
    parts.forEach((v, k) => {
      re.set(v.re, k * per);
      im.set(v.im, k * per);
    });
    return { coils: 1, slice: parts[0]!.slice * parts.length, phase: parts[0]!.phase, read: parts[0]!.read, re, im };
  };
  const kv = stack(kParts);
  const img = stack(iParts);
  const mag = magnitude(img);
  let max = 0;
  for (const v of mag) if (v > max) max = v;
  const seconds = (Date.now() - t0) / 1000;
  const axes = logicalAxes(protocol);
  const ms = slicePositions(protocol);
  const threeD = seq.grid.threeD;
  const thkMm = protocol.slice.thickness * 1e3;
  const spacingMm = threeD ? thkMm : ms.spacing * 1e3;
  const firstMm = threeD
    ? (protocol.slice.position + (protocol.matrix.slice % 2 === 0 ? protocol.slice.thickness / 2 : 0) - Math.floor(protocol.matrix.slice / 2) * protocol.slice.thickness) * 1e3
    : ms.positions[0]! * 1e3;
  const report: Record<string, unknown> = {
    tool: { name: "isofold", version: version() },
    created: new Date().toISOString(),
    safety: SAFETY_NOTE,
    seed: o.seed,
    inputs: { phantom: resolve(o.phantom), protocol: o.protocol, set: o.sets },
    protocol: { ...protocol, units: "SI: s, m, T, T/m, T/m/s, Hz, rad" },
    sequence: {
      name: seq.name, timing: seq.timing, derived: seq.derived, phaseTable: seq.phaseTable,
      readoutReversedRows: seq.grid.reversed ? "rows read under a negative readout gradient are stored reversed (k ascending) in kspace.npy" : "none",
    },
    geometry: {
      read: axes.names.read, phase: axes.names.phase, slice: axes.names.slice,
      axes: { read: axes.read, phase: axes.phase, slice: axes.slice },
      oblique: axes.angle === 0 ? "none" : `tilted ${((axes.angle * 180) / Math.PI).toFixed(2)} deg about the ${axes.tiltAxis} axis`,
      frame: "phantom coordinates are RAS+ (x toward the subject's right, y anterior, z superior)",
      slices: threeD ? "one 3D slab" : {
        count: ms.positions.length, positions: ms.positions, acquisitionOrder: ms.order,
        model: "each slice simulated as its own run over its own isochromats with the TR shared; cross-talk between slices (excitation of neighbours by the slice profile's skirts) is not simulated",
      },
    },
    axes: {
      kspace: ["coil", "slice", "phase", "read"],
      image: ["coil", "slice", "phase", "read"],
      index: "index n along an axis of N points sits at (n − floor(N/2))·Δ along the positive physical direction named in geometry; the slice axis holds 3D slice-encoding steps or the slices in spatial order",
      kspaceGrid: "kspace.npy is the full Cartesian grid (read oversampling kept; lines and samples not acquired by partial Fourier are zero)",
      png: "image.png, kspace.png and truth-*.png are in display orientation (see the display section), not in array index order",
    },
    fftConvention: FFT_CONVENTION_TEXT,
    isochromats: {
      count: ctx.isoSummary.count, columns: ctx.isoSummary.columns, density: o.iso.density, sliceCount: isoOptionsFor(protocol, o.iso).sliceCount,
      sliceExtent: isoOptionsFor(protocol, o.iso).sliceExtent, fatModel: o.iso.fatModel, t2primeIsochromats: o.iso.t2primeIsochromats,
      t2primeSpread: ctx.isoSummary.spreads,
      note: "T2* = T2 plus a Lorentzian off-resonance spread of width 1/(π·T2′) per voxel (deterministic quantiles), plus any B0 the phantom defines" +
        (threeD ? "; 3D: through-slab grid of `density` isochromats per slice-encoding step over the slab plus ⌈N/8⌉ slice-encoding steps each side" : ""),
    },
    engine: {
      ...ctx.engine,
      order: `chunk partials summed in chunk order within blocks of ${BLOCK_CHUNKS} chunks, block sums in block order: bitwise the same for any number of workers or shards`,
    },
    tissues: {
      units: "pd relative to pure water; t1, t2, t2star in s; fatFraction 0..1",
      note: "library values for the nearer table (1.5 T or 3 T); `source` says, for each value, whether it was checked against the published source, recalled from memory, estimated by a rule or is a design value of our own",
      list: tissueReport(phantom),
    },
    measurements: { imageMax: max },
    fatShift: null as unknown,
    timingSeconds: seconds,
    warnings: [...protocol.warnings, ...ctx.isoSummary.warnings],
  };
  if (ctx.coils) report.coils = ctx.coils.report;
  const fx = fatShiftReport(protocol, seq, phantom, mag, o.iso.fatModel);
  report.fatShift = fx.report;
  (report.warnings as string[]).push(...fx.warnings);
  const dRead = protocol.fov.read / protocol.matrix.read, dPhase = protocol.fov.phase / protocol.matrix.phase;
  const files = await writeRunFolder(o.out, {
    extra: o.truth || ctx.coils ? new Map([...(o.truth ? truthFiles(fx.truth, displayTransform(axes)) : []), ...(ctx.coils?.files ?? [])]) : undefined,
    fatCentroid: fatCentroid(fx.truth, dRead, dPhase),
    kspace: kv,
    image: img,
    affine: voxelAffine(protocol, spacingMm, firstMm),
    voxelMm: [(protocol.fov.read / protocol.matrix.read) * 1e3, (protocol.fov.phase / protocol.matrix.phase) * 1e3, spacingMm],
    report,
  });
  if (!o.keepWarnings) printWarnings(report.warnings as string[]);
  return { dir: o.out, files, seconds, report };
}

export { defaultIsochromatOptions };
