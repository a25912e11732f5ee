/**
 * The library's one way through the pipeline: protocol → phantom → sequence
 * → isochromats → engine → recon → analysis → report. Reads and writes no
 * file and touches no Node module, so it runs in a web page as well as under
 * the command line (which adds file reading before and the run folder after).
 *
 *   const r = await simulate({ protocol: protocolJson, phantom: phantomJson, iso: { density: 1 } });
 *   r.image.re, r.image.im   // [coil][slice][phase][read]
 */
import { UserError } from "./errors.js";
import { parseProtocol, logicalAxes, slicePositions, type Protocol, type ProtocolResolver } from "./protocol/index.js";
import { parsePhantom, type Phantom, type RealArray } from "./phantom/index.js";
import { buildSequence, sequenceDefinition, sliceStepCentre, type Sequence } from "./sequence/index.js";
import { expandCells, sampleCells, defaultIsochromatOptions, spreadWarnings, autoClosedForm, r2prime, T2PRIME_MODELS, type IsochromatCells, type IsoGeometry, type IsochromatOptions, type IsochromatSet, type SampledExtent } from "./isochromats/index.js";
import { BLOCK_CHUNKS, MAX_CLASS_LINES, serialExecutor, simulateCells, simulateWith, type EnginePlan, type Executor, type KSpace, type ReadoutChoice, type ReadoutReport } from "./engine/index.js";
import { toGrid, reconstructGrid, magnitude, type ComplexVolume } from "./recon/reconstruct.js";
import { FFT_CONVENTION_TEXT } from "./recon/convention.js";
import { fatShiftReport } from "./analysis/report.js";
import { isoOptionsFor, nonSelectiveRemark, sampledLimits, slabCoverage, type IsoSampling } from "./sampling.js";
import { checkSliceConvergence } from "./engine/index.js";
import { FAT_PEAKS_PPM } from "./constants.js";
import { samplingRemarks } from "./analysis/sampling.js";
import type { TruthMaps } from "./analysis/index.js";
import type { Volume } from "./io/run-folder.js";

export const SAFETY_NOTE =
  "isofold is not a medical device. It does not model RF heating (SAR), peripheral nerve stimulation or acoustic noise; " +
  "defer to the scanner's own safety system, local regulations and licensed practice.";

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

/** A complex volume [coil][slice][phase][read]: the one definition is the run folder's. */
export type { Volume };

/** The sequence of a protocol; a user error in it names the protocol file. */
export function buildSequenceOf(p: Protocol, file: string): Sequence {
  try {
    return buildSequence(p);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(file);
    throw e;
  }
}

/** Axis names of the k-space and image volumes, outermost first. */
export const VOLUME_AXES = ["coil", "slice", "phase", "read"] as const;

/** Progress of an engine run: chunk `done` of `total` of slice `slice` (0-based) of `slices`; `isochromatTRs` is the work done so far in that slice. */
export interface SimulateProgress {
  slice: number;
  slices: number;
  done: number;
  total: number;
  isochromatTRs: number;
}

/** Input of {@link simulate}: the two objects, their overrides and how to run. */
export interface SimulateInput {
  /** Protocol object as in a protocol file (values with units), or one parsed already (`parsedProtocol`). */
  protocol?: unknown;
  parsedProtocol?: Protocol;
  /** Phantom object as in a phantom file, or one parsed already (`parsedPhantom`, at the protocol's field). */
  phantom?: unknown;
  parsedPhantom?: Phantom;
  /** `key.path=value` protocol overrides (the CLI's --set), applied after `extend`. */
  sets?: string[];
  /** Names of the inputs in messages and the report (e.g. file names); default "protocol" and "phantom". */
  protocolName?: string;
  phantomName?: string;
  /** Resolves a protocol's `extend` (see parseProtocol), and the preset names offered when it fails. */
  resolveExtend?: ProtocolResolver;
  presets?: string[];
  /** Reads a field-map array a phantom names (b0.fieldMap.file); without one a field map is refused. */
  readArray?: (path: string) => RealArray;
  /** Changes the phantom before it is sampled (dataset perturbations). */
  phantomTransform?: (ph: Phantom) => Phantom;
  /** Isochromat options: density, slice isochromats and extent, fat model, T2′ spread (defaults: defaultIsochromatOptions()). */
  iso?: Partial<IsochromatOptions>;
  /** Seed of every random choice, recorded in the report (default 1). */
  seed?: number;
  /** Where the engine runs (default: serial on this thread). Every executor gives the same bits. */
  executor?: Executor;
  /** Isochromats per chunk (default CHUNK_ISOCHROMATS); part of the result's definition. */
  chunkIsochromats?: number;
  /** WebAssembly SIMD kernels where available (default true). */
  wasm?: boolean;
  /** Readout operator: "auto" (default: the cheaper by a cost predicted from the plan), "fast" (exact to `tolerance`, falls back to "direct" saying why) or "direct" (the oracle). */
  readout?: ReadoutChoice;
  /** Relative L2 error of k-space allowed to the fast readout operator (default 1e-6). */
  tolerance?: number;
  /** Aborting stops the engine; simulate then rejects with AbortedError. */
  signal?: AbortSignal;
  onProgress?: (p: SimulateProgress) => void;
  /**
   * Sampling of the phantom and expansion into isochromats (default `sampleCells`, `expandCells`). A caller may
   * put a cache here (the previewer does, across edits that leave the sampling unchanged); it must return what
   * these functions would return, with `warnings` and `notes` lists of its own (prepareSimulation appends to them).
   */
  sampleCells?: typeof sampleCells;
  expandCells?: (cells: IsochromatCells) => IsochromatSet;
  /**
   * Called with the first slice's sampling inputs before any isochromat is made
   * (the CLI's memory check): once before the cells are sampled, `stored` false
   * where the engine may stream the fast operator's weights from the cells (no
   * isochromat stored); and again with `stored` true before the isochromats are
   * made one by one, where they are (the direct operator, a B0 model with more RF classes than the fast operator holds, coils).
   */
  beforeIsochromats?: (e: {
    phantom: Phantom; geo: IsoGeometry; fieldT: number; iso: IsochromatOptions; seq: Sequence; stored: boolean;
    /** The options asked for (before the through-slice count is raised and T2′ decided). */
    asked: IsochromatOptions;
    /** The options this run would sample with had `change` been asked for (raised and decided as here): for a check's suggestions. */
    isoFor: (change: Partial<IsochromatOptions>) => IsochromatOptions;
  }) => void;
  /** Use iso.sliceCount as given, without raising it for the coherence pathways (studies of a coarse grid; default false). */
  exactSliceCount?: boolean;
  /** Run the a-posteriori through-slice convergence check on one probe column (default true). */
  convergenceCheck?: boolean;
  /** Replaces the engine for each slice (the CLI's simulate --coils); its files and report join the result. */
  runEngine?: (sl: { seq: Sequence; cells: IsochromatCells; readonly iso: IsochromatSet; protocol: Protocol }) => Promise<{ kspace: KSpace; plan: EnginePlan; readout?: ReadoutReport | ReadoutReport[]; files?: Map<string, Uint8Array>; report?: Record<string, unknown> }>;
  /** Recorded in report.inputs (default: the names and sets). */
  inputs?: Record<string, unknown>;
  /** Recorded in report.tool.version (default "unknown"). */
  version?: string;
  /** Worker count recorded in report.engine (default the executor's session size is not known here: 1). */
  workers?: number;
}

export { isoOptionsFor, sampledLimits, slabCoverage, pathwayOrder, profileReach, type IsoSampling } from "./sampling.js";

/** One slice (or the 3D slab) to simulate: its sequence and isochromats. */
export interface SliceRun {
  position: number;
  seq: Sequence;
  /** The phantom sampled on the isochromat grid, as cell contents (what the fast operator streams). */
  cells: IsochromatCells;
  /** The isochromats, stored one by one: made on first use (the direct operator needs them; the streamed fast operator does not). */
  readonly iso: IsochromatSet;
}

/** A slice run whose isochromats are expanded from its cells on first use. */
export function sliceRun(position: number, seq: Sequence, cells: IsochromatCells, expand: (cells: IsochromatCells) => IsochromatSet = expandCells, beforeExpand?: () => void): SliceRun {
  let iso: IsochromatSet | null = null;
  return {
    position, seq, cells,
    get iso() {
      if (iso === null) beforeExpand?.();
      return (iso ??= expand(cells));
    },
  };
}

/** Everything checked and sampled, before the engine: what {@link prepareSimulation} returns. */
export interface Prepared {
  protocol: Protocol;
  phantom: Phantom;
  /** Isochromat options as asked for (report) and as used for the first slice. */
  iso: IsochromatOptions;
  slices: SliceRun[];
  /** The first slice that holds isochromats. */
  first: SliceRun;
  protocolName: string;
  phantomName: string;
  /** How the isochromat grid was chosen (report). */
  sampling: IsoSampling;
}

/** The sampling geometry of one slice at `position` (m). */
export function isoGeometry(protocol: Protocol, position: number): IsoGeometry {
  return {
    axes: logicalAxes(protocol),
    dx: protocol.fov.read / protocol.matrix.read,
    dy: protocol.fov.phase / protocol.matrix.phase,
    thickness: protocol.slice.thickness,
    position,
    ...sampledLimits(protocol),
  };
}

/**
 * Per tissue of the phantom, whether a simulation of `input` takes T2′ in closed form (IsochromatOptions.t2primeModel),
 * found from the protocol, its sequence and the tissues alone (no sampling). A sweep asks it for every point, to keep
 * one T2′ model across them.
 */
export function t2primeClosedTissues(input: SimulateInput): boolean[] {
  const protocolName = input.protocolName ?? "protocol";
  const protocol = input.parsedProtocol ?? parseProtocol(input.protocol, { source: protocolName, sets: input.sets, resolve: input.resolveExtend, presets: input.presets });
  const loaded = input.parsedPhantom ?? parsePhantom(input.phantom, input.phantomName ?? "phantom", protocol.field, { readArray: input.readArray });
  const phantom = input.phantomTransform ? input.phantomTransform(loaded) : loaded;
  return t2primeModelFor(protocol, buildSequenceOf(protocol, protocolName), phantom, { ...defaultIsochromatOptions(), ...input.iso }).closed;
}

/**
 * Whether "auto" takes T2′ in closed form for some tissue of any of `phantoms` under `protocol` (a dataset's cases
 * differ only in their phantoms): a batch then runs every case in closed form, so that its cases share one T2′ model.
 */
export function t2primeClosedAnywhere(protocol: Protocol, phantoms: readonly Phantom[], iso: Partial<IsochromatOptions>): boolean {
  const seq = buildSequenceOf(protocol, "protocol"), asked = { ...defaultIsochromatOptions(), ...iso, t2primeModel: "auto" as const };
  return phantoms.some((ph) => t2primeModelFor(protocol, seq, ph, asked).closed.some(Boolean));
}

/** Parses and checks every input, builds each slice's sequence and samples its isochromats; throws UserError before any engine work. */
export function prepareSimulation(input: SimulateInput): Prepared {
  const protocolName = input.protocolName ?? "protocol";
  const phantomName = input.phantomName ?? "phantom";
  const protocol = input.parsedProtocol ?? parseProtocol(input.protocol, { source: protocolName, sets: input.sets, resolve: input.resolveExtend, presets: input.presets });
  const ms = slicePositions(protocol);
  const loaded = input.parsedPhantom ?? parsePhantom(input.phantom, phantomName, protocol.field, { readArray: input.readArray });
  const phantom = input.phantomTransform ? input.phantomTransform(loaded) : loaded;
  const asked: IsochromatOptions = { ...defaultIsochromatOptions(), ...input.iso };
  const seq0 = buildSequenceOf(protocol, protocolName);
  const threeD = sequenceDefinition(protocol.sequence).threeD;
  const slab = threeD ? slabCoverage(protocol, seq0, phantom) : null;
  const chosen = isoOptionsFor(protocol, asked, seq0, slab?.steps);
  const t2prime = t2primeModelFor(protocol, seq0, phantom, asked);
  const isoOpts = { ...(input.exactSliceCount ? { ...chosen, sliceCount: asked.sliceCount, sliceExtent: asked.sliceExtent } : chosen), offsetHz: protocol.shim, t2primeClosed: t2prime.closed };
  const isoFor = (change: Partial<IsochromatOptions>): IsochromatOptions => {
    const a = { ...asked, ...change }, c = isoOptionsFor(protocol, a, seq0, slab?.steps);
    return { ...(input.exactSliceCount ? { ...c, sliceCount: a.sliceCount, sliceExtent: a.sliceExtent } : c), offsetHz: protocol.shim, t2primeClosed: t2primeModelFor(protocol, seq0, phantom, a).closed };
  };
  const sampling: IsoSampling = {
    sliceCount: isoOpts.sliceCount, sliceExtent: isoOpts.sliceExtent, pathwayMoment: isoOpts.pathwayMoment, pathwayOrder: isoOpts.pathwayOrder,
    notes: [], convergence: null,
  };
  if (!threeD && isoOpts.sliceCount > asked.sliceCount) {
    sampling.notes.push(
      `through-slice isochromats raised from ${asked.sliceCount} to ${isoOpts.sliceCount}: coherence pathways reach the ADC with up to ` +
        `${isoOpts.pathwayMoment.toFixed(1)} cycles per slice thickness (crushers, spoilers, the refocusing pulses' own slice-select lobes, ` +
        `echo-train pathways up to order ${isoOpts.pathwayOrder}), and no aliased copy may land where the slice profiles carry signal`,
    );
  }
  if (slab?.note) sampling.notes.push(slab.note);
  const slabWarning = slab?.warning ?? nonSelectiveRemark(protocol, phantom, isoOpts.sliceExtent, ms.positions);
  const remarks = samplingRemarks(phantom, protocol, asked.density);
  const slices: SliceRun[] = [];
  for (const position of ms.positions) {
    // one slice where the protocol puts it: its sequence is the one built above (the same inputs, so the same object values)
    const seq = ms.positions.length === 1 && Object.is(position, protocol.slice.position)
      ? seq0
      : buildSequenceOf({ ...protocol, slice: { ...protocol.slice, position } }, protocolName);
    if (ms.positions.length > 1 && ms.positions.length * seq.activeTime > protocol.tr + 1e-9) {
      const maxN = Math.floor((protocol.tr + 1e-9) / seq.activeTime);
      throw new UserError(
        `${ms.positions.length} slices of ${(seq.activeTime * 1e3).toFixed(2)} ms each do not fit in tr ${(protocol.tr * 1e3).toFixed(2)} ms; ` +
          `set tr to at least ${(Math.ceil(ms.positions.length * seq.activeTime * 1e5) / 1e2).toFixed(2)} ms or slices.count to at most ${maxN}`,
        protocolName, "slices.count",
      );
    }
    const geo = isoGeometry(protocol, position);
    // slices run one after another: one slice's isochromats and k-space must fit
    // the cells alone (streamed fast operator) where no per-isochromat coil run asks for stored isochromats
    // (a B0 model streams too: its classes are hashed from the cells, engine/fast-stream.ts)
    const mayStream = input.readout !== "direct" && !input.runEngine;
    const check = (stored: boolean) => input.beforeIsochromats?.({ phantom, geo, fieldT: protocol.field, iso: isoOpts, seq, stored, asked, isoFor });
    if (slices.length === 0) check(!mayStream);
    const iso = (input.sampleCells ?? sampleCells)(phantom, geo, protocol.field, isoOpts);
    if (iso.count === 0 && ms.positions.length === 1) {
      const fine = remarks.fine.length ? `, or its shapes are finer than the isochromat spacing of ${(remarks.spacing * 1e3).toPrecision(3)} mm and fall between the sample points (raise --density or the matrix)` : "";
      throw new UserError(`no part of the phantom lies in the slice at ${(position * 1e3).toFixed(1)} mm${fine}; move slice.position`, protocolName, "slice.position");
    }
    if (iso.count === 0) iso.warnings.push(`the slice at ${(position * 1e3).toFixed(1)} mm holds no part of the phantom; its image is empty`);
    iso.warnings.push(...phantom.warnings);
    if (slices.length === 0) iso.warnings.push(...remarks.fine, ...remarks.fov);
    if (slabWarning && slices.length === 0) iso.warnings.push(slabWarning);
    if (slices.length === 0) {
      iso.warnings.push(...t2prime.warnings);
      iso.notes.push(...t2prime.notes);
    }
    slices.push(sliceRun(position, seq, iso, input.expandCells, slices.length === 0 && mayStream ? () => check(true) : undefined));
  }
  if (slices.every((sl) => sl.cells.count === 0)) {
    throw new UserError(`no part of the phantom lies in any of the ${slices.length} slices; move slice.position`, protocolName, "slice.position");
  }
  const first = slices.find((sl) => sl.cells.count > 0)!;
  if (!threeD && input.convergenceCheck !== false) {
    // a-posteriori check of the through-slice grid on one probe column (engine/convergence.ts)
    const axes = logicalAxes(protocol);
    const c = checkSliceConvergence(first.seq, phantom.tissues, { axes, thickness: protocol.slice.thickness, position: first.position, offsetHz: protocol.shim }, isoOpts.sliceCount, isoOpts.sliceExtent);
    sampling.convergence = { relativeChange: c.relativeChange, tolerance: c.tolerance, converged: c.converged, method: "probe column (in-plane centre, each tissue) on the through-slice grid and on the grid shifted by half a step; relative L2 change of every ADC sample" };
    if (!c.converged) {
      first.cells.warnings.push(
        `through-slice sampling may not be converged: the signal changes by ${(100 * c.relativeChange).toFixed(2)} % (tolerance ${(100 * c.tolerance).toFixed(1)} %) ` +
          `when the ${isoOpts.sliceCount} through-slice isochromats are shifted by half a step; raise --slice-isochromats (e.g. to ${2 * isoOpts.sliceCount})`,
      );
    }
  }
  return { protocol, phantom, iso: asked, slices, first, protocolName, phantomName, sampling };
}

/**
 * How T2′ is modelled in this run (IsochromatOptions.t2primeModel), per tissue: in closed form (R2* = R2 + R2′, no
 * spread) or as the spread; with the warnings and notes that go with it. The closed form is the Lorentzian spread's
 * exact ensemble average, exp(−|t − t₀|/T2′), where nothing refocuses the spread: in an ideally spoiled gradient echo the
 * transverse magnetization at a readout comes from the last excitation alone (t₀ its isodelay, to within the pulse's
 * response over the spread's few hertz). A spin echo refocuses the spread, and a balanced or not ideally spoiled
 * sequence carries older pathways in which it is partly refocused: those keep the spread. The dephasing times judged
 * are TE and the ends of the readout (of the echo train, where echo times vary).
 */
function t2primeModelFor(protocol: Protocol, seq: Sequence, phantom: Phantom, iso: IsochromatOptions): { closed: boolean[]; warnings: string[]; notes: string[] } {
  const model = iso.t2primeModel ?? "auto";
  if (!T2PRIME_MODELS.includes(model)) throw new UserError(`iso.t2primeModel ${JSON.stringify(model)} is not a T2′ model; use one of ${T2PRIME_MODELS.join(", ")}`);
  const def = sequenceDefinition(protocol.sequence);
  // a gradient echo (spoiled between TRs, nothing refocused): the spread's dephasing time at the k-space centre is TE
  const gradientEcho = def.spoils && !def.refocuses(protocol);
  const holds = gradientEcho && protocol.spoiling === "ideal";
  const none = { closed: phantom.tissues.map(() => false), warnings: [] as string[], notes: [] as string[] };
  const n = Math.max(1, Math.round(iso.t2primeIsochromats));
  if (!holds && model === "closed-form" && phantom.tissues.some((t) => r2prime(t.t2, t.t2star) > 0)) {
    const why = def.refocuses(protocol) ? "it refocuses the spread (spin echo)" : !def.spoils ? "it is balanced (no spoiling)" : `its spoiling is "${protocol.spoiling}", not ideal`;
    none.warnings.push(`--t2prime-model closed-form holds for an ideally spoiled gradient echo only and ${why}; this run models T2′ by the spread of ${n} isochromats per voxel`);
  }
  if (!gradientEcho) return none;
  const ro = seq.derived["readoutDuration"]?.value;
  const half = typeof ro === "number" ? ro / 2 : 0;
  const te = seq.timing.te;
  const times = [te, te - half, te + half];
  if (seq.echoTimes) {
    let lo = Infinity, hi = -Infinity;
    for (const t of seq.echoTimes) if (Number.isFinite(t)) (lo = Math.min(lo, t)), (hi = Math.max(hi, t));
    if (hi >= lo) times.push(lo - half, hi + half);
  }
  const ts = times.filter((t) => t >= 0);
  // RF spoiling or none keeps older pathways: the spread stays, and says where it is coarse at TE
  if (!holds) return { ...none, warnings: [...none.warnings, ...spreadWarnings(phantom.tissues, n, iso.density * iso.density, ts, false)] };
  if (model === "spread") return { ...none, warnings: spreadWarnings(phantom.tissues, n, iso.density * iso.density, ts, true) };
  if (model === "closed-form") return { ...none, closed: phantom.tissues.map((t) => r2prime(t.t2, t.t2star) > 0) };
  const a = autoClosedForm(phantom.tissues, n, ts);
  const lines = spreadLineFactor(protocol, seq, phantom, iso, n, a.closed);
  if (lines !== null) {
    // the spread would keep the fast operator from running (3D: through-slab positions × the spread); the closed form is exact here
    return {
      ...none, closed: phantom.tissues.map((t) => r2prime(t.t2, t.t2star) > 0),
      notes: [
        `T2′ in closed form for every tissue, R2* = R2 + R2′ (the Lorentzian spread's exact average in an ideally spoiled gradient echo): ` +
          `the spread of ${n} would make up to ${lines.toLocaleString("en")} RF classes × readouts, beyond the fast operator's ${MAX_CLASS_LINES.toLocaleString("en")}; --t2prime-model spread keeps the spread`,
      ],
    };
  }
  return { ...none, closed: a.closed, notes: a.note ? [a.note] : [] };
}

/**
 * An upper bound on the RF classes × readouts of the fast operator's line factor with the T2′ spread of `n` on the
 * tissues not in `closed` (through-slice or through-slab positions × each tissue's spectral components (water, fat
 * peaks) × its spread), where it exceeds MAX_CLASS_LINES; else null.
 */
function spreadLineFactor(protocol: Protocol, seq: Sequence, phantom: Phantom, iso: IsochromatOptions, n: number, closed: readonly boolean[]): number | null {
  if (n <= 1) return null;
  const slab = sequenceDefinition(protocol.sequence).threeD ? slabCoverage(protocol, seq, phantom) : null;
  const through = isoOptionsFor(protocol, iso, seq, slab?.steps).sliceCount;
  let components = 0;
  phantom.tissues.forEach((t, i) => {
    const peaks = (t.fatFraction < 1 ? 1 : 0) + (t.fatFraction > 0 ? ((t.fatModel ?? iso.fatModel) === "single" ? 1 : FAT_PEAKS_PPM.length) : 0);
    components += peaks * (closed[i] || !(r2prime(t.t2, t.t2star) > 0) ? 1 : n);
  });
  let readouts = 0;
  for (const b of seq.blocks) if (b.kind === "adc") readouts++;
  const lines = through * components * readouts;
  return lines > MAX_CLASS_LINES ? lines : null;
}

/** Isochromat summary for the report. */
export interface IsochromatSummary {
  count: number;
  columns: number;
  warnings: string[];
  spreads: { tissue: string; t2prime: number | null; isochromats: number; model?: "spread" | "closed form" }[];
  /** How the grid was chosen and what it covers (absent in partials of older versions). */
  sampling?: IsoSampling;
  extent?: SampledExtent;
  notes?: string[];
}

/** Engine summary for the report. */
export interface EngineSummary {
  chunks: number;
  rfClasses: number;
  ops: number;
  workers: number;
  shards?: number;
  runs?: number;
  /** What the readout operator did (one report per engine run when there are several). */
  readout?: ReadoutReport | ReadoutReport[];
}

export function spreadSummary(iso: { spreads: IsochromatSet["spreads"] }): IsochromatSummary["spreads"] {
  return iso.spreads.map((s) => ({ tissue: s.tissue, t2prime: Number.isFinite(s.t2prime) ? s.t2prime : null, isochromats: s.count, model: s.closedForm ? "closed form" : "spread" }));
}

/** Runs the engine on every slice of a prepared simulation, one after another (cross-talk between slices is not simulated). */
export async function runSlices(prep: Prepared, input: SimulateInput): Promise<{ kspaces: KSpace[]; isoSummary: IsochromatSummary; engine: EngineSummary; coils?: AssembleContext["coils"] }> {
  const executor = input.executor ?? serialExecutor();
  const kspaces: KSpace[] = [];
  let plan: EnginePlan | null = null;
  let count = 0;
  let coils: AssembleContext["coils"];
  const readouts: ReadoutReport[] = [];
  for (let k = 0; k < prep.slices.length; k++) {
    const sl = prep.slices[k]!;
    const n = sl.seq.kspace.slice * sl.seq.kspace.phase * sl.seq.kspace.read;
    if (sl.cells.count === 0) {
      kspaces.push({ coils: 1, rows: sl.seq.kspace.slice * sl.seq.kspace.phase, read: sl.seq.kspace.read, re: new Float64Array(n), im: new Float64Array(n) });
      continue;
    }
    const trs = sl.seq.blocks.filter((b) => b.kind === "rf").length / Math.max(1, sl.seq.pulses.length);
    let res: { kspace: KSpace; plan: EnginePlan; readout?: ReadoutReport | ReadoutReport[] };
    if (input.runEngine) {
      // the cells, and the isochromats made only if the engine asks for them (the coil run streams where the fast operator applies)
      const r = await input.runEngine({ seq: sl.seq, cells: sl.cells, get iso() { return sl.iso; }, protocol: prep.protocol });
      coils = { files: r.files ?? new Map(), report: r.report ?? {} };
      res = r;
    } else res = await simulateCells(executor, sl.seq, sl.cells, () => sl.iso, {
      receiverFilter: prep.protocol.receiverFilter, chunkIsochromats: input.chunkIsochromats, wasm: input.wasm, signal: input.signal,
      readout: input.readout, tolerance: input.tolerance,
      onProgress: input.onProgress
        ? (done, total) => input.onProgress!({ slice: k, slices: prep.slices.length, done, total, isochromatTRs: (sl.cells.count * trs * done) / total })
        : undefined,
    });
    plan = res.plan;
    if (res.readout) readouts.push(...[res.readout].flat());
    count += sl.cells.count;
    kspaces.push(res.kspace);
  }
  return {
    kspaces,
    isoSummary: {
      count, columns: prep.first.cells.columns, warnings: prep.slices.flatMap((s) => s.cells.warnings), spreads: spreadSummary(prep.first.cells),
      sampling: prep.sampling, extent: prep.first.cells.extent, notes: [...new Set(prep.slices.flatMap((s) => s.cells.notes))],
    },
    engine: {
      chunks: plan!.chunks, rfClasses: plan!.classes, ops: plan!.ops.length, workers: input.workers ?? 1, runs: prep.slices.length,
      readout: readouts.length === 0 ? undefined : readouts.length === 1 ? readouts[0]! : readouts,
    },
    ...(coils ? { coils } : {}),
  };
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

/** What {@link assembleResult} needs besides k-space: enough to rebuild a result from merged shards. */
export interface AssembleContext {
  protocol: Protocol;
  phantom: Phantom;
  /** Sequence of each engine run (one per slice, or one for a 3D slab), in spatial order. */
  seqs: Sequence[];
  /** Isochromat options as asked for. */
  iso: IsochromatOptions;
  seed: number;
  inputs: Record<string, unknown>;
  isoSummary: IsochromatSummary;
  engine: EngineSummary;
  version?: string;
  /** Start time (ms since the epoch) for report.timingSeconds. */
  t0: number;
  /** Files and report of a coil run (the CLI's simulate --coils). */
  coils?: { files: Map<string, Uint8Array>; report: Record<string, unknown> };
}

/** The result of a simulation. */
export interface SimulateResult {
  /** Full Cartesian k-space grid [coil][slice][phase][read] (read oversampling kept; partial-Fourier gaps zero). */
  kspace: Volume;
  /** Reconstructed complex image [coil][slice][phase][read]. */
  image: Volume;
  /** |image|, same layout. */
  magnitude: Float64Array;
  /** Axis names of kspace and image, outermost first. */
  axes: typeof VOLUME_AXES;
  /** report.json's object. */
  report: Record<string, unknown>;
  /** Every warning of the run (also in report.warnings). */
  warnings: string[];
  /** 3×4 voxel index → RAS+ (mm) affine and voxel size (mm), for NIfTI. */
  affine: number[][];
  voxelMm: [number, number, number];
  /** Ground-truth maps on the image grid of the middle slice (index ⌊S/2⌋ of the slice axis, the one the fat shift is measured on). */
  truth: TruthMaps;
  protocol: Protocol;
  phantom: Phantom;
  sequences: Sequence[];
  /** Per engine run k-space as acquired, [coil][row][read]. */
  runs: KSpace[];
  /** Extra files a coil run made (the CLI writes them beside the run's). */
  coilFiles?: Map<string, Uint8Array>;
}

/**
 * The k-space of every engine run on its full Cartesian grid and its image
 * (sequence by sequence: acquired rows → grid, then FFT), stacked along the
 * slice axis in the order of `seqs`.
 */
export function reconstructRuns(seqs: Sequence[], kspaces: KSpace[]): { kspace: Volume; image: Volume } {
  const kParts: ComplexVolume[] = [], iParts: ComplexVolume[] = [];
  kspaces.forEach((k, idx) => {
    const s = seqs[idx]!;
    const acq = { slice: s.kspace.slice, phase: s.kspace.phase, read: s.kspace.read, re: k.re, im: k.im };
    const grid = toGrid(acq, s.grid);
    kParts.push(grid);
    iParts.push(reconstructGrid(grid, s.grid, s.image));
  });
  const stack = (parts: ComplexVolume[]): Volume => {
    // one run (a single slice or slab): its arrays, made here, as they are
    if (parts.length === 1) return { coils: 1, slice: parts[0]!.slice, phase: parts[0]!.phase, read: parts[0]!.read, re: parts[0]!.re, im: parts[0]!.im };
    const per = parts[0]!.re.length;
    const re = new Float64Array(per * parts.length), im = new Float64Array(per * parts.length);
    parts.forEach((v, k) => {
      re.set(v.re, k * per);
      im.set(v.im, k * per);
    });
    return { coils: 1, slice: parts[0]!.slice * parts.length, phase: parts[0]!.phase, read: parts[0]!.read, re, im };
  };
  return { kspace: stack(kParts), image: stack(iParts) };
}

/** The largest value of `v` and 0 (a loop of its own: assembleResult, run once per run, is then not compiled for it). */
function largest(v: Float64Array): number {
  let max = 0;
  for (let i = 0; i < v.length; i++) if (v[i]! > max) max = v[i]!;
  return max;
}

/** Reconstructs the k-space of every engine run, stacks them and builds the report; shared by simulate and the CLI's merge. */
export function assembleResult(ctx: AssembleContext, kspaces: KSpace[]): SimulateResult {
  const { protocol, phantom } = ctx;
  const seq = ctx.seqs[0]!;
  const { kspace: kv, image: img } = reconstructRuns(ctx.seqs, kspaces);
  const mag = magnitude(img);
  const max = largest(mag);
  const seconds = (Date.now() - ctx.t0) / 1000;
  const axes = logicalAxes(protocol);
  const ms = slicePositions(protocol);
  const threeD = seq.grid.threeD;
  const thkMm = protocol.slice.thickness * 1e3;
  const spacingMm = threeD ? thkMm : ms.spacing * 1e3;
  const firstMm = threeD
    ? sliceStepCentre(0, protocol.matrix.slice, protocol.slice.thickness, protocol.slice.position) * 1e3
    : ms.positions[0]! * 1e3;

  const report: Record<string, unknown> = {
    tool: { name: "isofold", version: ctx.version ?? "unknown" },
    created: new Date().toISOString(),
    safety: SAFETY_NOTE,
    seed: ctx.seed,
    inputs: ctx.inputs,
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
      kspace: [...VOLUME_AXES],
      image: [...VOLUME_AXES],
      index: "index n along an axis of N points sits at (n − floor(N/2))·Δ along the positive physical direction named in geometry; the slice axis holds 3D slice-encoding steps or the slices in spatial order",
      kspaceGrid: "kspace.npy is the full Cartesian grid (read oversampling kept; lines and samples not acquired by partial Fourier are zero)",
      png: "image.png, kspace.png and truth-*.png are in display orientation (see the display section), not in array index order",
    },
    fftConvention: FFT_CONVENTION_TEXT,
    isochromats: {
      count: ctx.isoSummary.count, columns: ctx.isoSummary.columns, density: ctx.iso.density,
      sliceCount: ctx.isoSummary.sampling?.sliceCount ?? isoOptionsFor(protocol, ctx.iso, seq).sliceCount,
      sliceExtent: ctx.isoSummary.sampling?.sliceExtent ?? isoOptionsFor(protocol, ctx.iso, seq).sliceExtent,
      sampledExtent: ctx.isoSummary.extent ?? null,
      sampledExtentNote: "range (m) of the isochromat grid along read, phase and slice (logical axes, slice centred on the first slice): every shape's full extent along phase; along read where the receiver filter passes signal, everywhere without it",
      throughSlice: ctx.isoSummary.sampling
        ? {
            pathwayMoment: ctx.isoSummary.sampling.pathwayMoment, pathwayOrder: ctx.isoSummary.sampling.pathwayOrder,
            unit: "cycles per slice thickness", convergence: ctx.isoSummary.sampling.convergence,
          }
        : null,
      notes: [...(ctx.isoSummary.sampling?.notes ?? []), ...(ctx.isoSummary.notes ?? [])],
      fatModel: ctx.iso.fatModel, t2primeIsochromats: ctx.iso.t2primeIsochromats, t2primeModel: ctx.iso.t2primeModel ?? "auto",
      t2primeSpread: ctx.isoSummary.spreads,
      note: "T2* = T2 plus T2′, per tissue (t2primeSpread[].model): a Lorentzian off-resonance spread of width 1/(π·T2′) per voxel (deterministic quantiles), " +
        "or in closed form R2* = R2 + R2′ on every isochromat (the spread's exact average in an ideally spoiled gradient echo); plus any B0 the phantom defines" +
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
  const fx = fatShiftReport(protocol, seq, phantom, mag, ctx.iso.fatModel);
  report.fatShift = fx.report;
  const warnings = report.warnings as string[];
  warnings.push(...fx.warnings);
  return {
    kspace: kv, image: img, magnitude: mag, axes: VOLUME_AXES, report, warnings,
    affine: voxelAffine(protocol, spacingMm, firstMm),
    voxelMm: [(protocol.fov.read / protocol.matrix.read) * 1e3, (protocol.fov.phase / protocol.matrix.phase) * 1e3, spacingMm],
    truth: fx.truth, protocol, phantom, sequences: ctx.seqs, runs: kspaces,
    ...(ctx.coils ? { coilFiles: ctx.coils.files } : {}),
  };
}

/**
 * Simulates one protocol on one phantom: parses both objects (or takes them
 * parsed), samples isochromats, runs the engine on `input.executor` (serial
 * by default), reconstructs and measures. Returns k-space and image arrays
 * with their axes, the report object and the warnings. Reads and writes no
 * file. Rejects with UserError on a bad input, AbortedError on abort.
 */
export async function simulate(input: SimulateInput): Promise<SimulateResult> {
  const t0 = Date.now();
  const prep = prepareSimulation(input);
  const run = await runSlices(prep, input);
  return assembleResult({
    protocol: prep.protocol, phantom: prep.phantom, seqs: prep.slices.map((s) => s.seq), iso: prep.iso,
    seed: input.seed ?? 1,
    inputs: input.inputs ?? { phantom: prep.phantomName, protocol: prep.protocolName, set: input.sets ?? [] },
    isoSummary: run.isoSummary, engine: run.engine, version: input.version, t0, ...(run.coils ? { coils: run.coils } : {}),
  }, run.kspaces);
}
