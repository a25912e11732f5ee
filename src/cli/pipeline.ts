/**
 * Wires the stages for one run: protocol → phantom → sequence →
 * isochromats → engine → recon → analysis → run folder. No physics here.
 */
import { readFileSync } from "node:fs";
import { createRequire } from "node:module";
import { resolve } from "node:path";
import { UserError } from "../errors.js";
import { loadProtocol, logicalAxes, slicePositions, type Protocol } from "../protocol/index.js";
import { loadPhantom, phantomBounds, type Phantom } from "../phantom/index.js";
import { aliasFreeCount, buildSequence, pathwayMoments, pulseProfileReach, type Sequence } from "../sequence/index.js";
import { makeIsochromats, defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet, type SampledExtent } from "../isochromats/index.js";
import { blockChunks, blockCount, BLOCK_CHUNKS, shardBlocks, simulateParallel, type EnginePlan, type KSpace, type ReadoutReport } from "../engine/index.js";
import { countChunks } from "../engine/plan.js";
import { checkSliceConvergence } from "../engine/index.js";
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
  /** Run the a-posteriori through-slice convergence check (default true). */
  convergenceCheck?: boolean;
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
  isoSummary: {
    count: number; columns: number; warnings: string[]; spreads: { tissue: string; t2prime: number | null; isochromats: number }[];
    /** How the grid was chosen and what it covers (absent in partials of older versions). */
    sampling?: IsoSampling; extent?: SampledExtent; notes?: string[];
  };
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
 * Pathway order followed when choosing the through-slice count
 * (sequence/pathways.ts): twice the refocusing pulses per TR, at least 4
 * (pathways carried across TRs), at most 8 (cost). Measured on
 * test/through-slice.test.ts: a 4-echo train converges to < 0.1 % at order 8,
 * to about 1 % at order 4.
 */
export function pathwayOrder(seq: Sequence): number {
  let exc = 0, ref = 0;
  for (const b of seq.blocks) {
    if (b.kind !== "rf") continue;
    if (b.pulse === 0) exc++;
    else if (seq.pulses[b.pulse]!.flip > Math.PI / 2 + 1e-9) ref++;
  }
  const perTr = exc > 0 ? Math.round(ref / exc) : 0;
  return Math.min(8, Math.max(4, 2 * perTr));
}

/**
 * Reach (cycles per thickness) of the slice profiles' spectra: an aliased
 * pathway copy closer to zero than this still adds signal. Three times the
 * largest pulse time-bandwidth product (the profile's transition band is
 * thickness/tbw wide), at least 4; found on the convergence tests of
 * test/through-slice.test.ts (SE, RARE, bSSFP, tbw 2–8).
 */
export function profileReach(maxPulseTbw: number): number {
  return Math.max(4, 3 * maxPulseTbw);
}

/**
 * Isochromat options for a protocol. A coherence pathway that reaches an ADC
 * with a through-slice moment of K cycles per thickness (crushers, spoilers,
 * the refocusing pulses' own slice-select lobes, higher orders of echo
 * trains: sequence/pathways.ts) is only simulated faithfully when the
 * through-slice grid does not alias it back near zero: with ρ isochromats per
 * thickness the grid sums it as if it had the moments K − m·ρ. The count is
 * the smallest that keeps every such copy (m ≠ 0) of every pathway moment
 * farther than the profile reach from zero (aliasFreeCount), and at least
 * the requested count.
 * 3D: the through-slab grid covers M slice-encoding steps (the N of the slab plus a
 * margin of ⌈N/8⌉ on each side for the slab profile's skirts, which then wrap
 * along slice-encoding steps as on a scanner), at least `density` isochromats per
 * slice-encoding step (and 2K + 1 for a spoiler moment K per step), weighted per
 * slice-encoding step thickness.
 */
export function isoOptionsFor(p: Protocol, iso: IsochromatOptions, seq?: Sequence, slabSteps?: number): IsochromatOptions & { pathwayMoment: number; pathwayOrder: number } {
  const s = seq ?? buildSequence(p);
  const order = pathwayOrder(s);
  const pm = pathwayMoments(s, p.slice.thickness, order);
  const K = pm.maxMoment;
  if (p.sequence !== "gre3d") {
    const moments = pm.moments.filter((k) => k > 0.5);
    const n = moments.length ? aliasFreeCount(moments, profileReach(pm.maxPulseTbw), iso.sliceExtent, iso.sliceCount) : iso.sliceCount;
    return { ...iso, sliceCount: Math.max(iso.sliceCount, n), pathwayMoment: K, pathwayOrder: order };
  }
  const n = p.matrix.slice;
  const m = slabSteps ?? n + 2 * Math.ceil(n / 8);
  const per = Math.max(iso.density, Math.ceil(2 * K + 1 - 1e-9));
  return { ...iso, sliceCount: m * per, sliceExtent: m, pathwayMoment: K, pathwayOrder: order };
}

/** Loads and checks every input; throws UserError before any work or file. */
export function prepare(o: RunOptions): {
  protocol: Protocol; seq: Sequence; iso: IsochromatSet; phantomFile: string; slices: SliceRun[]; phantom: Phantom; sampling: IsoSampling;
} {
  const protocol = loadProtocol(o.protocol, o.sets);
  const ms = slicePositions(protocol);
  const loaded = loadPhantom(o.phantom, protocol.field, { readArray: readRealNpy });
  const phantom = o.phantomTransform ? o.phantomTransform(loaded) : loaded;
  const axes = logicalAxes(protocol);
  let seq0: Sequence;
  try {
    seq0 = buildSequence(protocol);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(o.protocol);
    throw e;
  }
  const slab = protocol.sequence === "gre3d" ? slabCoverage(protocol, seq0, phantom) : null;
  const isoOpts = { ...isoOptionsFor(protocol, o.iso, seq0, slab?.steps), offsetHz: protocol.shim };
  const sampling: IsoSampling = {
    sliceCount: isoOpts.sliceCount, sliceExtent: isoOpts.sliceExtent, pathwayMoment: isoOpts.pathwayMoment, pathwayOrder: isoOpts.pathwayOrder,
    notes: [], convergence: null,
  };
  if (protocol.sequence !== "gre3d" && isoOpts.sliceCount > o.iso.sliceCount) {
    sampling.notes.push(
      `through-slice isochromats raised from ${o.iso.sliceCount} to ${isoOpts.sliceCount}: coherence pathways reach the ADC with up to ` +
        `${isoOpts.pathwayMoment.toFixed(1)} cycles per slice thickness (crushers, spoilers, the refocusing pulses' own slice-select lobes, ` +
        `echo-train pathways up to order ${isoOpts.pathwayOrder}), and no aliased copy may land where the slice profiles carry signal`,
    );
  }
  if (slab?.note) sampling.notes.push(slab.note);
  const slabWarning = slab?.warning ?? null;
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
      ...sampledLimits(protocol),
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
    if (slabWarning && slices.length === 0) iso.warnings.push(slabWarning);
    slices.push({ position, seq, iso });
  }
  if (slices.every((sl) => sl.iso.count === 0)) {
    throw new UserError(`no part of the phantom lies in any of the ${slices.length} slices; move slice.position`, o.protocol, "slice.position");
  }
  const first = slices.find((sl) => sl.iso.count > 0)!;
  if (protocol.sequence !== "gre3d" && o.convergenceCheck !== false) {
    // a-posteriori check of the through-slice grid on one probe column (engine/convergence.ts)
    const c = checkSliceConvergence(first.seq, phantom.tissues, { axes, thickness: protocol.slice.thickness, position: first.position, offsetHz: protocol.shim }, isoOpts.sliceCount, isoOpts.sliceExtent);
    sampling.convergence = { relativeChange: c.relativeChange, tolerance: c.tolerance, converged: c.converged, method: "probe column (in-plane centre, each tissue) on the through-slice grid and on the grid shifted by half a step; relative L2 change of every ADC sample" };
    if (!c.converged) {
      first.iso.warnings.push(
        `through-slice sampling may not be converged: the signal changes by ${(100 * c.relativeChange).toFixed(2)} % (tolerance ${(100 * c.tolerance).toFixed(1)} %) ` +
          `when the ${isoOpts.sliceCount} through-slice isochromats are shifted by half a step; raise --slice-isochromats (e.g. to ${2 * isoOpts.sliceCount})`,
      );
    }
  }
  return { protocol, seq: first.seq, iso: first.iso, phantomFile: o.phantom, slices, phantom, sampling };
}

/** How the isochromat grid was chosen, for report.json. */
export interface IsoSampling {
  sliceCount: number;
  sliceExtent: number;
  /** Largest through-slice moment (cycles per thickness) of a followed pathway at an ADC, and the order followed. */
  pathwayMoment: number;
  pathwayOrder: number;
  notes: string[];
  convergence: { relativeChange: number; tolerance: number; converged: boolean; method: string } | null;
}

/**
 * In-plane sampling limits (isochromats/IsoGeometry): along phase every
 * shape's full extent (no anti-alias filter acts on phase encoding); along
 * read, with the receiver filter, out to the sampled FOV (os·FOV, twice the
 * filter's Nyquist edge, leaving room for off-resonance of up to
 * ½·N·os·BW_px Hz), without it everywhere. 2D shapes on a tilted plane are
 * unbounded in-plane: they are cut at 1.5 × the acquired FOV, with a warning.
 */
export function sampledLimits(p: Protocol): { clipRead: number; clipPhase: number; unboundedRead: number; unboundedPhase: number; readStopBand: boolean } {
  const readFov = p.fov.read * p.oversampling.read;
  return {
    clipRead: p.receiverFilter ? readFov : Infinity,
    clipPhase: Infinity,
    unboundedRead: 1.5 * readFov,
    unboundedPhase: 1.5 * p.fov.phase * (1 + p.oversampling.phase),
    readStopBand: p.receiverFilter,
  };
}

/**
 * 3D: slice-encoding steps the through-slab grid covers, at least the slab plus
 * ⌈N/8⌉ steps each side, and out to every shape's extent along the slab
 * normal where the excitation still reaches (small-tip profile ≥ 1e-3 of its
 * centre; all of it for a non-selective pulse), so tissue outside the slab
 * wraps along slice encoding as on a scanner. Same parity as N.
 */
export function slabCoverage(p: Protocol, seq: Sequence, ph: Phantom): { steps: number; note?: string; warning?: string } {
  const n = p.matrix.slice, thk = p.slice.thickness;
  const m0 = n + 2 * Math.ceil(n / 8);
  const ax = logicalAxes(p);
  const b = phantomBounds(ph);
  let lo = 0, hi = 0;
  for (let k = 0; k < 3; k++) {
    const d = ax.slice[k]!;
    if (d === 0) continue;
    lo += Math.min(b.min[k]! * d, b.max[k]! * d);
    hi += Math.max(b.min[k]! * d, b.max[k]! * d);
  }
  const pos = p.slice.position;
  const objectHalf = Math.max(Math.abs(lo - pos), Math.abs(hi - pos));
  const exc = seq.pulses[0]!;
  const cap = 8 * m0 * thk; // beyond this a 2D (infinite) phantom is cut
  const reach = pulseProfileReach(exc, pos, Math.min(objectHalf, cap));
  const half = Math.min(objectHalf, reach, cap);
  const need = Math.ceil(((2 * half) / thk - n) / 2);
  const steps = Math.max(m0, n + 2 * Math.max(0, need));
  const cm = (x: number) => `${(x * 100).toFixed(1)} cm`;
  const out: { steps: number; note?: string; warning?: string } = { steps };
  if (steps > m0) out.note = `3D: the through-slab grid covers ${steps} slice-encoding steps (±${cm((steps * thk) / 2)}) so excited tissue outside the slab wraps along slice encoding`;
  if (objectHalf > (steps * thk) / 2 + 1e-9 && reach > (steps * thk) / 2) {
    out.warning = `3D: the phantom reaches ${Number.isFinite(objectHalf) ? cm(objectHalf) : "infinitely far (2D shapes)"} from the slab centre along the slab normal, where the ` +
      `${exc.gradient === 0 ? "non-selective " : ""}excitation still acts, but is sampled only within ±${cm((steps * thk) / 2)}: tissue beyond that does not wrap into the image; use shapes of finite length`;
  }
  return out;
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
    isoSummary: {
      count, columns: p.iso.columns, warnings: p.slices.flatMap((s) => s.iso.warnings), spreads: spreadSummary(p.iso),
      sampling: p.sampling, extent: p.iso.extent, notes: [...new Set(p.slices.flatMap((s) => s.iso.notes))],
    },
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
    isoSummary: { count: p.iso.count, columns: p.iso.columns, warnings: p.iso.warnings, spreads: spreadSummary(p.iso), sampling: p.sampling, extent: p.iso.extent, notes: p.iso.notes },
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
      count: ctx.isoSummary.count, columns: ctx.isoSummary.columns, density: o.iso.density,
      sliceCount: ctx.isoSummary.sampling?.sliceCount ?? isoOptionsFor(protocol, o.iso, seq).sliceCount,
      sliceExtent: ctx.isoSummary.sampling?.sliceExtent ?? isoOptionsFor(protocol, o.iso, seq).sliceExtent,
      sampledExtent: ctx.isoSummary.extent ?? null,
      sampledExtentNote: "range (m) of the isochromat grid along read, phase and slice (logical axes, slice centred on the first slice): every shape's full extent along phase; along read where the receiver filter passes signal, everywhere without it",
      throughSlice: ctx.isoSummary.sampling
        ? {
            pathwayMoment: ctx.isoSummary.sampling.pathwayMoment, pathwayOrder: ctx.isoSummary.sampling.pathwayOrder,
            unit: "cycles per slice thickness", convergence: ctx.isoSummary.sampling.convergence,
          }
        : null,
      notes: [...(ctx.isoSummary.sampling?.notes ?? []), ...(ctx.isoSummary.notes ?? [])],
      fatModel: o.iso.fatModel, t2primeIsochromats: o.iso.t2primeIsochromats,
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
