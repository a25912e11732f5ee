/**
 * The previewer's run of one protocol on one phantom, inside the page's Web
 * Worker: the CLI's own readers and validators (through an in-memory file
 * table), the same sequence, isochromats, engine kernels, summation order and
 * reconstruction as `isofold simulate`, and the closed-form `check`. No file
 * leaves the page. Only the middle slice of a multi-slice protocol is run.
 */
import { prepare, isoOptionsFor, defaultIsochromatOptions, SAFETY_NOTE } from "../cli/pipeline.js";
import { UserError } from "../errors.js";
import { simulateSerial } from "../engine/index.js";
import { toGrid, reconstructGrid, magnitude } from "../recon/reconstruct.js";
import { fatShiftInput, predictFatShift, multiPeakMeanPpm } from "../analysis/index.js";
import { FAT_SINGLE_PPM } from "../constants.js";
import { checkProtocol, type CheckResult } from "../check/index.js";
import { loadPhantom } from "../phantom/index.js";
import { loadProtocol } from "../protocol/index.js";
import { buildSequence } from "../sequence/index.js";
import { logicalAxes, type Protocol } from "../protocol/index.js";
import { displayTransform, type DisplayTransform } from "../report/display.js";
import { encodeNpy } from "../io/npy.js";
import type { IsochromatOptions } from "../isochromats/index.js";
import { putFile } from "./shims/vfs.js";

export type Quality = "preview" | "full";

export interface RunRequest {
  /** Preset name, or a path under /inputs/ put into the file table with putInput. */
  protocol: string;
  phantom: string;
  sets: string[];
  fatModel: "single" | "multi";
  quality: Quality;
}

export interface RunOutput {
  quality: Quality;
  protocol: Protocol;
  nRead: number;
  nPhase: number;
  /** Image plane [phase][read] magnitude (display turned in the page), k-space plane magnitude [phase][readAcquired]. */
  image: Float64Array;
  kmag: Float64Array;
  kRead: number;
  kPhase: number;
  display: DisplayTransform;
  fatShift: Record<string, unknown>;
  check: CheckResult | null;
  warnings: string[];
  isochromats: number;
  engineMs: number;
  /** Readout operator that ran ("fast" or "direct"). */
  readout: string;
  /** Milliseconds of each step in the worker: prepare (read, validate, sample isochromats), engine, recon (and analysis). */
  timings: Record<string, number>;
  iso: IsochromatOptions;
  /** Full volumes for export (complex64 .npy bytes). */
  kspaceNpy: Uint8Array;
  imageNpy: Uint8Array;
  slicesRun: string;
  derived: Record<string, unknown>;
}

export const PHANTOM_DIR = "/phantoms";
export const INPUT_DIR = "/inputs";
/** Where the core looks for presets under the bundle's import.meta.url (see build-preview.ts). */
export const PRESET_DIR = "/src/protocol/presets";

export function putPreset(name: string, text: string): void {
  putFile(`${PRESET_DIR}/${name}.json`, text);
}
export function putPhantom(name: string, text: string): string {
  const p = `${PHANTOM_DIR}/${name}.json`;
  putFile(p, text);
  return p;
}
export function putInput(name: string, text: string): string {
  const p = `${INPUT_DIR}/${name.replace(/[^A-Za-z0-9._-]/g, "_")}`;
  putFile(p, text);
  return p;
}

/** Isochromat options of each quality: preview is density 1, few through-slice isochromats and no T2′ spread. */
export function qualityOptions(q: Quality, fatModel: "single" | "multi"): IsochromatOptions {
  const d = defaultIsochromatOptions();
  if (q === "full") return { ...d, fatModel };
  return { ...d, density: 1, sliceCount: 3, sliceExtent: 3, t2primeIsochromats: 1, fatModel };
}

export class Cancelled extends Error {}

/** `isofold check` with its default thresholds and ROI on the request's inputs (as cli/check.ts runCheck, without its option parsing). */
export function checkRequest(req: RunRequest): CheckResult {
  const protocol = loadProtocol(req.protocol, req.sets);
  let seq;
  try {
    seq = buildSequence(protocol);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(req.protocol);
    throw e;
  }
  const phantom = loadPhantom(req.phantom, protocol.field);
  const result = checkProtocol(phantom, protocol, seq, {});
  result.notes.push(...protocol.warnings.map((w) => `protocol: ${w}`), ...phantom.warnings.map((w) => `phantom: ${w}`));
  return result;
}

/** Runs one request; `stop()` is asked between engine chunks and a true answer throws Cancelled. */
export function runPreview(req: RunRequest, stop: () => boolean, onProgress: (done: number, total: number) => void): RunOutput {
  const tStart = performance.now();
  let readout = "";
  const timings: Record<string, number> = {};
  const iso = qualityOptions(req.quality, req.fatModel);
  const prep = prepare({ phantom: req.phantom, protocol: req.protocol, sets: req.sets, out: "", seed: 1, iso, workers: 1, maxMemory: 2 * 2 ** 30 });
  const protocol = prep.protocol;
  const mid = prep.slices.length > 1 ? prep.slices[Math.floor(prep.slices.length / 2)]! : prep.slices[0]!;
  const seq = mid.seq;
  // the closed-form check of this edit runs in the other worker (see checkRequest)
  const check: CheckResult | null = null;
  const t0 = performance.now();
  timings.prepare = t0 - tStart;
  // the engine as `simulate` runs it (engine/index.ts simulateSerial: the fast readout operator, or the direct one where
  // it does not apply, bitwise the same as the worker pool); a newer edit stops the direct path between chunks
  if (stop()) throw new Cancelled();
  const sim = mid.iso.count > 0
    ? simulateSerial(seq, mid.iso, {
      receiverFilter: protocol.receiverFilter,
      onProgress: (done, total) => {
        if (stop()) throw new Cancelled();
        onProgress(done, total);
      },
    })
    : null;
  const size = seq.kspace.slice * seq.kspace.phase * seq.kspace.read;
  const re = sim ? sim.kspace.re : new Float64Array(size), im = sim ? sim.kspace.im : new Float64Array(size);
  readout = sim ? sim.readout.operator : "none";
  const engineMs = performance.now() - t0;
  timings.engine = engineMs;
  const t1 = performance.now();
  const acq = { slice: seq.kspace.slice, phase: seq.kspace.phase, read: seq.kspace.read, re, im };
  const grid = toGrid(acq, seq.grid);
  const img = reconstructGrid(grid, seq.grid, seq.image);
  const mag = magnitude(img);
  const nRead = seq.image.read, nPhase = seq.image.phase;
  const plane = Math.floor(seq.image.slice / 2);
  const image = mag.slice(plane * nRead * nPhase, (plane + 1) * nRead * nPhase);
  const kRead = grid.read, kPhase = grid.phase, kp = Math.floor(grid.slice / 2);
  const kmag = new Float64Array(kRead * kPhase);
  for (let i = 0; i < kmag.length; i++) kmag[i] = Math.hypot(grid.re[kp * kRead * kPhase + i]!, grid.im[kp * kRead * kPhase + i]!);
  const base = fatShiftInput(protocol, seq);
  const main = predictFatShift({ ...base, ppm: FAT_SINGLE_PPM });
  const mean = predictFatShift({ ...base, ppm: multiPeakMeanPpm() });
  const fatShift = {
    fatModel: req.fatModel,
    fatHz: main.hz,
    predicted: {
      readout: { px: main.readout.px, mm: main.readout.m * 1e3, direction: main.readout.direction },
      slice: { mm: main.slice.m * 1e3, direction: main.slice.direction },
      phase: { px: main.phase.px, mm: main.phase.m * 1e3, direction: main.phase.direction },
      multiPeakMean: { ppm: mean.ppm, readoutPx: mean.readout.px, phasePx: mean.phase.px },
    },
  };
  const vol = (v: { slice: number; phase: number; read: number; re: Float64Array; im: Float64Array }) =>
    encodeNpy({ dtype: "complex64", shape: [1, v.slice, v.phase, v.read], data: { re: v.re, im: v.im } });
  return {
    quality: req.quality, protocol, nRead, nPhase, image, kmag, kRead, kPhase,
    display: displayTransform(logicalAxes(protocol)),
    fatShift, check,
    warnings: [...new Set([...protocol.warnings, ...mid.iso.warnings])],
    isochromats: mid.iso.count, engineMs, readout, timings: { ...timings, recon: performance.now() - t1, total: performance.now() - tStart },
    iso: isoOptionsFor(protocol, iso),
    kspaceNpy: vol(grid), imageNpy: vol(img),
    derived: seq.derived as Record<string, unknown>,
    slicesRun: prep.slices.length > 1 ? `middle slice (${Math.floor(prep.slices.length / 2) + 1} of ${prep.slices.length}) only` : "the one slice",
  };
}

/** A user error as the CLI prints it (without the "isofold: error: " prefix), with its key path. */
export function userMessage(e: unknown): { message: string; key: string | null } | null {
  if (e instanceof UserError) return { message: e.message, key: e.keyPath ?? null };
  return null;
}

export { SAFETY_NOTE };
