/**
 * The previewer's run of one protocol on one phantom, inside a Web Worker, on
 * the library's pipeline (src/api.ts: prepareSimulation, runSlices,
 * reconstructRuns — what `simulate()` runs before it measures the image for
 * report.json, which the page skips for speed): the same parsers, validators,
 * sequence, isochromats, engine (fast readout operator, direct fallback),
 * summation order and reconstruction as `isofold simulate`, and the
 * closed-form `check`. Inputs are objects held in the worker; nothing is
 * read from or written to a file, and nothing leaves the page.
 */
import { prepareSimulation, runSlices, reconstructRuns, SAFETY_NOTE, type SimulateInput } from "../api.js";
import { UserError } from "../errors.js";
import { AbortedError, readoutKernelName, serialExecutor, type Executor } from "../engine/index.js";
import { fatShiftInput, predictFatShift, multiPeakMeanPpm } from "../analysis/index.js";
import { FAT_SINGLE_PPM } from "../constants.js";
import { checkProtocol, type CheckResult } from "../check/index.js";
import { logicalAxes, parseProtocol, type Protocol, type ProtocolResolver } from "../protocol/index.js";
import { parsePhantom, type Phantom } from "../phantom/index.js";
import { buildSequence } from "../sequence/index.js";
import { displayTransform, type DisplayTransform } from "../report/display.js";
import { decodeNpy, encodeNpy } from "../io/npy.js";
import type { RealArray } from "../phantom/index.js";
import { defaultIsochromatOptions, expandCells, sampleCells, type IsochromatCells, type IsochromatOptions, type IsochromatSet } from "../isochromats/index.js";

export type Quality = "preview" | "full";

export interface RunRequest {
  /** Preset name, or the name of a file protocol put with putInput ("file:…"). */
  protocol: string;
  /** Bundled phantom name, or the name of a file phantom put with putInput ("file:…"). */
  phantom: string;
  sets: string[];
  fatModel: "single" | "multi";
  quality: Quality;
  /**
   * A linear B0 term (Hz/cm along x, y, z) added to the phantom's own B0
   * model as a b0 expression — evaluated by the phantom's B0 expression
   * sandbox like any phantom file's (phantom/b0.ts), no other evaluator.
   */
  b0Linear?: [number, number, number];
  /** Readout operator (default "auto", as the CLI's --readout). */
  /** Readout operator and chunking (default: PREVIEW_READOUT and PREVIEW_CHUNK_ISOCHROMATS at preview quality, the CLI's defaults at default quality). */
  readout?: "auto" | "fast" | "direct";
  chunkIsochromats?: number;
}

export interface RunOutput {
  quality: Quality;
  protocol: Protocol;
  nRead: number;
  nPhase: number;
  /** Magnitude image plane [phase][read] of the middle slice. */
  image: Float64Array;
  /** |k| of the same plane of the full grid [phase][read with oversampling] and the .npy bytes: sent after the image (see RunRest). */
  kmag?: Float64Array;
  kRead: number;
  kPhase: number;
  display: DisplayTransform;
  fatShift: Record<string, unknown>;
  check: CheckResult | null;
  warnings: string[];
  isochromats: number;
  engineMs: number;
  /** Where the engine's chunks ran (the engine workers, or the worker's own thread for a preview of one chunk). */
  ranOn: string;
  /** What this run took from the caches of earlier runs (the parsed phantom, the sampled cells, the isochromats). */
  reused: string[];
  /** Readout operator that ran ("fast" or "direct"). */
  readout: string;
  /** The kernels of this worker's engine (WebAssembly SIMD or the scalar twins; the same bits either way). */
  kernels: string;
  /** Milliseconds in the worker by stage (prepare: parse, sequence, isochromats; engine; recon; pack: views and .npy bytes; total). */
  timings: Record<string, number>;
  iso: IsochromatOptions;
  /** Complex64 .npy bytes of the k-space and image volumes, as `simulate` writes kspace.npy and image.npy (after the image: RunRest). */
  kspaceNpy?: Uint8Array;
  imageNpy?: Uint8Array;
  slicesRun: string;
  derived: Record<string, unknown>;
}

const presets = new Map<string, unknown>();
const phantoms = new Map<string, unknown>();
const inputs = new Map<string, unknown>();
/** .npy bytes of field maps: of the bundled phantoms (path relative to the phantoms folder) and of files chosen in the page. */
const bundledArrays = new Map<string, Uint8Array>();
const fileArrays = new Map<string, Uint8Array>();

/** A field-map file: `bundled` ones were fetched from the server's phantoms folder, the others were chosen in the page. */
export function putArray(name: string, bytes: Uint8Array, bundled: boolean): void {
  (bundled ? bundledArrays : fileArrays).set(name, bytes);
  clearCaches();
}

export function putPreset(name: string, text: string): void {
  presets.set(name, JSON.parse(text));
}
export function putPhantom(name: string, text: string): void {
  phantoms.set(name, JSON.parse(text));
}
/** A file named on the command line or chosen in the page, under "file:<name>". */
export function putInput(name: string, text: string): void {
  inputs.set(`file:${name}`, JSON.parse(text));
  clearCaches();
}

/*
 * Caches across edits. An edit of TE, TR, flip, bandwidth and most other
 * settings changes neither the phantom nor where it is sampled, so the parsed
 * phantom, the sampled cells and their isochromats of the previous run are
 * used again. Each is keyed on everything its computation reads (below), is
 * cleared when a file or field map is put, and hands out lists of warnings and
 * notes of their own (prepareSimulation and the engine append to them), so a
 * run with a cache hit returns the same bits and messages as a fresh run
 * (test/preview-browser.test.ts: after a sequence of edits the page's k-space
 * equals the CLI's).
 */
const CACHE_ENTRIES = 4;
/** Isochromats kept beside the newest entry at most (an expanded isochromat takes 76 bytes: about 150 MB). */
const CACHE_ISOCHROMATS = 2_000_000;
let phantomCache: { key: string; phantom: Phantom }[] = [];
let cellCache: { phantom: Phantom; key: string; cells: IsochromatCells }[] = [];
/** The cached cells a handed-out copy came from, and the isochromats expanded from them. */
const cellOrigin = new WeakMap<IsochromatCells, IsochromatCells>();
const expanded = new WeakMap<IsochromatCells, IsochromatSet>();
/** Hits and misses since the worker started (shown in the page's status line, read by the tests). */
export const cacheStats = { phantom: { hit: 0, miss: 0 }, cells: { hit: 0, miss: 0 }, isochromats: { hit: 0, miss: 0 } };

function clearCaches(): void {
  phantomCache = [];
  cellCache = [];
}

/** A key of plain data: non-finite numbers and −0 kept apart (JSON would write them as null and 0). */
function keyOf(v: unknown): string {
  return JSON.stringify(v, (_k, x: unknown) => (typeof x === "number" && (!Number.isFinite(x) || Object.is(x, -0)) ? `#${Object.is(x, -0) ? "-0" : String(x)}` : x));
}

function remember<T>(list: T[], entry: T): T[] {
  return [entry, ...list].slice(0, CACHE_ENTRIES);
}

/** The parsed phantom of a request at a field (T): parsePhantom reads the phantom object, its name, the field and its field maps. */
function phantomFor(req: RunRequest, field: number): Phantom {
  const key = keyOf([req.phantom, req.b0Linear ?? null, field]);
  const hit = phantomCache.find((e) => e.key === key);
  if (hit) {
    cacheStats.phantom.hit++;
    return hit.phantom;
  }
  cacheStats.phantom.miss++;
  const phantom = parsePhantom(phantomInput(req.phantom, req.b0Linear), req.phantom, field, { readArray: arrayReader(req.phantom) });
  phantomCache = remember(phantomCache, { key, phantom });
  return phantom;
}

/** A copy of cached cells with lists of its own (the arrays are shared: nothing writes to them). */
function handOut(cells: IsochromatCells): IsochromatCells {
  const copy: IsochromatCells = Object.create(Object.getPrototypeOf(cells) as object, Object.getOwnPropertyDescriptors(cells));
  copy.warnings = [...cells.warnings];
  copy.notes = [...cells.notes];
  cellOrigin.set(copy, cells);
  return copy;
}

/** sampleCells with a cache: its result depends on the phantom, the geometry, the field and the isochromat options only. */
const cachedSampleCells: typeof sampleCells = (phantom, geo, field, opts) => {
  const key = keyOf([geo, field, opts]);
  const hit = cellCache.find((e) => e.phantom === phantom && e.key === key);
  if (hit) {
    cacheStats.cells.hit++;
    return handOut(hit.cells);
  }
  cacheStats.cells.miss++;
  const cells = sampleCells(phantom, geo, field, opts);
  // the newest entry always; older ones while the kept isochromats stay within CACHE_ISOCHROMATS (memory of the page)
  let total = 0;
  cellCache = remember(cellCache, { phantom, key, cells }).filter((e, i) => (total += e.cells.count) <= CACHE_ISOCHROMATS || i === 0);
  return handOut(cells);
};

/** expandCells with a cache: the isochromats of a handed-out copy are those of the cells it came from, with the copy's lists. */
function cachedExpandCells(cells: IsochromatCells): IsochromatSet {
  const origin = cellOrigin.get(cells);
  if (!origin) return expandCells(cells);
  let set = expanded.get(origin);
  if (set) cacheStats.isochromats.hit++;
  else {
    cacheStats.isochromats.miss++;
    set = expandCells(origin);
    expanded.set(origin, set);
  }
  return { ...set, warnings: cells.warnings, notes: cells.notes };
}

/** `extend` resolves to bundled presets only (a page has no files beside the protocol). */
const resolvePreset: ProtocolResolver = (name) => {
  const n = name.replace(/\.json$/, "");
  return presets.has(n) ? { source: n, json: structuredClone(presets.get(n)) } : null;
};

function protocolInput(name: string): unknown {
  const v = inputs.get(name) ?? (presets.has(name) ? { extend: name } : undefined);
  if (v === undefined) throw new UserError(`no protocol file or preset named ${JSON.stringify(name)}; presets: ${[...presets.keys()].join(", ")}`);
  return structuredClone(v);
}
function phantomInput(name: string, b0Linear?: [number, number, number]): unknown {
  const v = inputs.get(name) ?? phantoms.get(name);
  if (v === undefined) throw new UserError(`no phantom named ${JSON.stringify(name)}; bundled: ${[...phantoms.keys()].join(", ")}`);
  return withLinearB0(structuredClone(v), b0Linear);
}

/** The phantom object with `b0Linear` (Hz/cm) added to its b0 expression (offsets of several b0 models add: phantom/b0.ts). */
export function withLinearB0(phantom: unknown, g?: [number, number, number]): unknown {
  if (!g || g.every((v) => v === 0) || typeof phantom !== "object" || phantom === null || Array.isArray(phantom)) return phantom;
  if (!g.every((v) => Number.isFinite(v))) throw new UserError(`the B0 linear term must be finite numbers in Hz/cm, got ${g.join(", ")}`);
  // Hz/cm → Hz/m (x, y, z of the expression are in m)
  const term = g.map((v, i) => `${v * 100} * ${"xyz"[i]}`).join(" + ");
  const ph = phantom as Record<string, unknown>;
  const b0 = typeof ph["b0"] === "object" && ph["b0"] !== null ? { ...(ph["b0"] as Record<string, unknown>) } : {};
  b0["expression"] = typeof b0["expression"] === "string" ? `(${b0["expression"]}) + ${term}` : term;
  return { ...ph, b0 };
}

/** Field-map reader of a phantom: bundled phantoms read the bundled maps, chosen files the files chosen beside them. */
function arrayReader(phantom: string): (path: string) => RealArray {
  const table = phantom.startsWith("file:") ? fileArrays : bundledArrays;
  return (path) => {
    const name = path.replace(/^\.\//, "");
    // a file chosen in the page is found by its own name too (a browser gives no folder)
    const bytes = table.get(name) ?? (table === fileArrays ? table.get(name.slice(name.lastIndexOf("/") + 1)) : undefined);
    if (!bytes) {
      throw new Error(phantom.startsWith("file:")
        ? `not chosen in the page: choose the phantom file together with its field map ${name}`
        : `not bundled with the previewer`);
    }
    const a = decodeNpy(bytes, name);
    if (a.dtype === "complex64" || a.dtype === "complex128") throw new Error(`expected a real array of Hz values, got ${a.dtype}`);
    return { shape: a.shape, data: a.data as ArrayLike<number> };
  };
}

/** Isochromat options of each quality: preview is density 1, few through-slice isochromats and no T2′ spread. */
export function qualityOptions(q: Quality, fatModel: "single" | "multi"): IsochromatOptions {
  const d = defaultIsochromatOptions();
  if (q === "full") return { ...d, fatModel };
  return { ...d, density: 1, sliceCount: 3, sliceExtent: 3, t2primeIsochromats: 1, fatModel };
}

/**
 * Preview quality runs the direct readout operator in chunks of this many
 * isochromats. At preview quality the direct operator is the cheaper one
 * (128², two-bottle in Node: about 5 ms setup and 20–30 ms of chunks, against
 * over 100 ms for the fast operator on one thread), and predicting the two
 * costs ("auto") alone takes about 15 ms; smaller chunks let both engine
 * workers share an edit (two chunks at 128²). The CLI gives the same bits with
 * `--readout direct` and ISOFOLD_CHUNK_ISOCHROMATS=8192 (the chunking fixes the
 * order of the sums). Default quality keeps the CLI's defaults ("auto", 32768).
 */
/** What the page needs after the image is painted: the k-space view and the exports. */
export interface RunRest {
  kmag: Float64Array;
  kspaceNpy: Uint8Array;
  imageNpy: Uint8Array;
  /** Milliseconds to make them. */
  packMs: number;
}

export const PREVIEW_READOUT = "direct" as const;
export const PREVIEW_CHUNK_ISOCHROMATS = 8192;

export class Cancelled extends Error {}

const local = serialExecutor();

/** `isofold check` with its default thresholds and ROI on the request's inputs. */
export function checkRequest(req: RunRequest): CheckResult {
  const protocol = parseProtocol(protocolInput(req.protocol), { source: req.protocol, sets: req.sets, resolve: resolvePreset, presets: [...presets.keys()] });
  let seq;
  try {
    seq = buildSequence(protocol);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(req.protocol);
    throw e;
  }
  const phantom = phantomFor(req, protocol.field);
  const result = checkProtocol(phantom, protocol, seq, {});
  result.notes.push(...protocol.warnings.map((w) => `protocol: ${w}`), ...phantom.warnings.map((w) => `phantom: ${w}`));
  return result;
}

/**
 * Runs one request; `stop()` is asked as the engine reports progress, and a true answer rejects with Cancelled.
 * Returns the output with the image, and `rest()`, which makes the k-space view and the .npy bytes (the worker
 * calls it after the image is on its way to the page).
 */
export async function runPreview(req: RunRequest, stop: () => boolean, onProgress: (done: number, total: number) => void, executor: Executor = serialExecutor()): Promise<{ out: RunOutput; rest: () => RunRest }> {
  const tStart = performance.now();
  const hits0 = [cacheStats.phantom.hit, cacheStats.cells.hit, cacheStats.isochromats.hit];
  const iso = qualityOptions(req.quality, req.fatModel);
  const ac = new AbortController();
  let input: SimulateInput, prep, run;
  let tPrep = tStart, tEngine = tStart;
  // where the engine's time goes: before the executor session (plan, operator choice), and the chunks on the engine workers
  let tOpen = NaN, chunkMs = 0;
  // where the chunks ran: a preview whose work is one job runs on this thread (the engine workers would add two
  // message hops and the plan's copy for nothing); every executor gives the same bits (engine/executor.ts)
  let ranOn = "";
  const timed: Executor = {
    open(plan, iso, jobs) {
      tOpen = performance.now();
      const here = req.quality === "preview" && jobs <= 1;
      ranOn = here ? "the preview worker's own thread (one chunk)" : "the engine workers";
      const s = (here ? local : executor).open(plan, iso, jobs);
      return {
        size: s.size, fillRfMaps: (c, sig) => s.fillRfMaps(c, sig), close: () => s.close(),
        async runChunks(c0, c1, onChunk, waitingFor, sig) {
          const t = performance.now();
          try { await s.runChunks(c0, c1, onChunk, waitingFor, sig); } finally { chunkMs += performance.now() - t; }
        },
      };
    },
  };
  try {
    // parsed here (as prepareSimulation would) so that the phantom comes from the cache
    const parsedProtocol = parseProtocol(protocolInput(req.protocol), { source: req.protocol, sets: req.sets, resolve: resolvePreset, presets: [...presets.keys()] });
    input = {
      parsedProtocol, protocolName: req.protocol,
      parsedPhantom: phantomFor(req, parsedProtocol.field), phantomName: req.phantom,
      sampleCells: cachedSampleCells, expandCells: cachedExpandCells,
      iso, executor: timed, signal: ac.signal, readout: req.readout ?? (req.quality === "preview" ? PREVIEW_READOUT : undefined),
      chunkIsochromats: req.chunkIsochromats ?? (req.quality === "preview" ? PREVIEW_CHUNK_ISOCHROMATS : undefined),
      // the through-slice convergence probe is part of the refined result only
      convergenceCheck: req.quality === "full",
      onProgress: (p) => {
        if (stop()) ac.abort();
        else onProgress(p.slice * p.total + p.done, p.slices * p.total);
      },
    };
    prep = prepareSimulation(input);
    tPrep = performance.now();
    if (stop()) throw new Cancelled();
    run = await runSlices(prep, input);
    tEngine = performance.now();
  } catch (e) {
    if (e instanceof Cancelled) throw e;
    if (e instanceof AbortedError || ac.signal.aborted) throw new Cancelled();
    throw e;
  }
  const seqs = prep.slices.map((sl) => sl.seq);
  const r = reconstructRuns(seqs, run.kspaces);
  const tSim = performance.now();
  const tRecon = tSim;
  const protocol = prep.protocol;
  const seq = seqs[Math.floor(seqs.length / 2)]!;
  const nRead = r.image.read, nPhase = r.image.phase;
  const plane = Math.floor(r.image.slice / 2);
  const image = new Float64Array(nRead * nPhase);
  for (let i = 0, o = plane * nRead * nPhase; i < image.length; i++) image[i] = Math.hypot(r.image.re[o + i]!, r.image.im[o + i]!);
  const kRead = r.kspace.read, kPhase = r.kspace.phase, kp = Math.floor(r.kspace.slice / 2) * kRead * kPhase;
  // the predicted shifts as report.json states them (fatShift.predicted); the page shows the prediction only
  const base = fatShiftInput(protocol, seq);
  const main = predictFatShift({ ...base, ppm: FAT_SINGLE_PPM });
  const mean = predictFatShift({ ...base, ppm: multiPeakMeanPpm() });
  const fatShift = {
    fatModel: req.fatModel,
    fatHz: main.hz,
    predicted: {
      readout: { px: main.readout.px, mm: main.readout.m * 1e3, direction: main.readout.direction, ...(main.readout.perLinePx !== undefined ? { perLinePx: main.readout.perLinePx } : {}) },
      slice: { mm: main.slice.m * 1e3, direction: main.slice.direction, ...(main.slice.refocusedM !== undefined ? { refocusedMm: main.slice.refocusedM * 1e3 } : {}) },
      phase: { px: main.phase.px, mm: main.phase.m * 1e3, direction: main.phase.direction },
      multiPeakMean: { ppm: mean.ppm, readoutPx: mean.readout.px, phasePx: mean.phase.px },
    },
  };
  const vol = (v: { coils: number; slice: number; phase: number; read: number; re: Float64Array; im: Float64Array }) =>
    encodeNpy({ dtype: "complex64", shape: [v.coils, v.slice, v.phase, v.read], data: { re: v.re, im: v.im } });
  const ro = run.engine.readout;
  const readout = Array.isArray(ro) ? ro.map((x) => x.operator).join(", ") : ro?.operator ?? "none";
  const out: RunOutput = {
    quality: req.quality, protocol, nRead, nPhase, image, kRead, kPhase,
    display: displayTransform(logicalAxes(protocol)),
    fatShift, check: null,
    warnings: [...new Set([...protocol.warnings, ...run.isoSummary.warnings])],
    isochromats: run.isoSummary.count,
    engineMs: tSim - tStart, readout, ranOn,
    reused: [cacheStats.phantom.hit, cacheStats.cells.hit, cacheStats.isochromats.hit].flatMap((h, i) => (h > hits0[i]! ? [["parsed phantom", "sampled cells", "isochromats"][i]!] : [])), kernels: readoutKernelName(),
    timings: {},
    iso,
    derived: seq.derived as unknown as Record<string, unknown>,
    slicesRun: seqs.length > 1 ? `${seqs.length} slices; the middle one is shown` : "one slice",
  };
  const tEnd = performance.now();
  out.timings = { prepare: tPrep - tStart, engine: tEngine - tPrep, engineSetup: Number.isNaN(tOpen) ? tEngine - tPrep : tOpen - tPrep, engineChunks: chunkMs, recon: tRecon - tEngine, pack: tEnd - tRecon, total: tEnd - tStart };
  void input;
  const rest = (): RunRest => {
    const t = performance.now();
    const kmag = new Float64Array(kRead * kPhase);
    for (let i = 0; i < kmag.length; i++) kmag[i] = Math.hypot(r.kspace.re[kp + i]!, r.kspace.im[kp + i]!);
    return { kmag, kspaceNpy: vol(r.kspace), imageNpy: vol(r.image), packMs: performance.now() - t };
  };
  return { out, rest };
}

/** A user error as the CLI prints it (without the "isofold: error: " prefix), with its key path. */
export function userMessage(e: unknown): { message: string; key: string | null } | null {
  if (e instanceof UserError) return { message: e.message, key: e.keyPath ?? null };
  return null;
}

export { SAFETY_NOTE };
