/**
 * Wires the stages for one run: protocol → phantom → sequence →
 * isochromats → engine → recon → analysis → run folder. No physics here.
 */
import { readFileSync } from "node:fs";
import { createRequire } from "node:module";
import { resolve } from "node:path";
import { UserError } from "../errors.js";
import { loadProtocol, logicalAxes, type Protocol } from "../protocol/index.js";
import { loadPhantom, type Phantom } from "../phantom/index.js";
import { buildSequence, type Sequence } from "../sequence/index.js";
import { makeIsochromats, defaultIsochromatOptions, type IsochromatOptions, type IsochromatSet } from "../isochromats/index.js";
import { simulateSerial } from "../engine/index.js";
import { reconstructCartesian, magnitude } from "../recon/reconstruct.js";
import { writeRunFolder, type Volume } from "../io/run-folder.js";
import { FFT_CONVENTION_TEXT } from "../recon/convention.js";
import { decodeNpy } from "../io/npy.js";
import { fatShiftReport, truthFiles } from "./effects.js";
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
  /** Changes the loaded phantom before it is sampled (dataset perturbations). */
  phantomTransform?: (ph: Phantom) => Phantom;
  /** Also write the ground-truth maps (truth-*.png / .npy). */
  truth?: boolean;
}

export interface RunResult {
  dir: string;
  files: string[];
  seconds: number;
  report: Record<string, unknown>;
}

/** Loads and checks every input; throws UserError before any work or file. */
export function prepare(o: RunOptions): { protocol: Protocol; seq: Sequence; iso: IsochromatSet; phantomFile: string; phantom: Phantom } {
  const protocol = loadProtocol(o.protocol, o.sets);
  let seq: Sequence;
  try {
    seq = buildSequence(protocol);
  } catch (e) {
    if (e instanceof UserError) throw e.inFile(o.protocol);
    throw e;
  }
  const loaded = loadPhantom(o.phantom, protocol.field, { readArray: readRealNpy });
  const phantom = o.phantomTransform ? o.phantomTransform(loaded) : loaded;
  const axes = logicalAxes(protocol);
  const iso = makeIsochromats(
    phantom,
    {
      axes,
      dx: protocol.fov.read / protocol.matrix.read,
      dy: protocol.fov.phase / protocol.matrix.phase,
      thickness: protocol.slice.thickness,
      position: protocol.slice.position,
      clipRead: protocol.fov.read * protocol.oversampling.read,
      clipPhase: 1.5 * protocol.fov.phase * (1 + protocol.oversampling.phase),
    },
    protocol.field,
    { ...o.iso, offsetHz: protocol.shim },
  );
  if (iso.count === 0) {
    throw new UserError(`no part of the phantom lies in the slice at ${(protocol.slice.position * 1e3).toFixed(1)} mm; move slice.position`, o.protocol, "slice.position");
  }
  iso.warnings.push(...phantom.warnings);
  return { protocol, seq, iso, phantomFile: o.phantom, phantom };
}

/** Reads a real .npy array (field maps) for the phantom stage. */
function readRealNpy(path: string): { shape: number[]; data: ArrayLike<number> } {
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

export function voxelAffine(p: Protocol, sliceThicknessMm: number): number[][] {
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

export function run(o: RunOptions): RunResult {
  const t0 = Date.now();
  const { protocol, seq, iso, phantom } = prepare(o);
  const progress = new Progress("simulating", "iso-TR", o.quiet);
  const trs = seq.blocks.filter((b) => b.kind === "rf").length / seq.pulses.length;
  const { kspace, plan } = simulateSerial(seq, iso, {
    receiverFilter: protocol.receiverFilter,
    onProgress: (d, t) => progress.update(d, t, (iso.count * trs * d) / t),
  });
  progress.done();
  const kv: Volume = { coils: 1, partitions: seq.kspace.partitions, phase: seq.kspace.phase, read: seq.kspace.read, re: kspace.re, im: kspace.im };
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
      count: iso.count, columns: iso.columns, density: o.iso.density, sliceCount: o.iso.sliceCount,
      sliceExtent: o.iso.sliceExtent, fatModel: o.iso.fatModel, t2primeIsochromats: o.iso.t2primeIsochromats,
      t2primeSpread: iso.spreads.map((s) => ({ tissue: s.tissue, t2prime: Number.isFinite(s.t2prime) ? s.t2prime : null, isochromats: s.count })),
      note: "T2* = T2 plus a Lorentzian off-resonance spread of width 1/(π·T2′) per voxel (deterministic quantiles), plus any B0 the phantom defines",
    },
    engine: { chunks: plan.chunks, rfClasses: plan.classes, ops: plan.ops.length, workers: 1 },
    measurements: { imageMax: max },
    fatShift: null as unknown,
    timingSeconds: seconds,
    warnings: iso.warnings,
  };
  const fx = fatShiftReport(protocol, seq, phantom, mag, o.iso.fatModel);
  report.fatShift = fx.report;
  (report.warnings as string[]).push(...fx.warnings);
  const files = writeRunFolder(o.out, {
    extra: o.truth ? truthFiles(fx.truth) : undefined,
    kspace: kv,
    image: { coils: 1, ...img },
    affine: voxelAffine(protocol, protocol.slice.thickness * 1e3),
    voxelMm: [(protocol.fov.read / protocol.matrix.read) * 1e3, (protocol.fov.phase / protocol.matrix.phase) * 1e3, protocol.slice.thickness * 1e3],
    report,
  });
  return { dir: o.out, files, seconds, report };
}

export { defaultIsochromatOptions };
