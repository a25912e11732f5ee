/**
 * The run folder contract (DEVELOPERS.md, Files): image.png, kspace.png,
 * kspace.npy, image.npy, image.nii, report.json, report.html — all staged
 * under temporary names and renamed together, so a killed run leaves no file
 * under a final name. The PNGs (and report.html) are in display orientation
 * (report/display.ts); the arrays keep their index order.
 */
import { OutputStage } from "./atomic.js";
import { encodeNpy } from "./npy.js";
import { encodeNifti1 } from "./nifti.js";
import { encodeGrayPng, logMagnitude } from "./png.js";
import { displayTransform, toDisplayInPlace, type DisplayTransform, type Vec3 } from "../report/display.js";
import { profilePlots, runReportHtml, type CheckItem, type LogicalRect, type PlotRenderer } from "../report/index.js";

/** A complex volume [coil][slice][phase][read] (row-major, read fastest), real and imaginary parts apart. */
export interface Volume {
  coils: number;
  slice: number;
  phase: number;
  read: number;
  re: Float64Array;
  im: Float64Array;
}

export interface RunFolderInput {
  kspace: Volume;
  image: Volume;
  /** |image| in the image's layout, where the caller has it (the result's `magnitude`): the same numbers, not computed again. */
  magnitude?: Float64Array;
  /** 3×4 affine (mm) from voxel (read, phase, slice-encoding step) index to RAS+ position. */
  affine: number[][];
  voxelMm: [number, number, number];
  report: Record<string, unknown>;
  /** Extra files (name → bytes), e.g. ground-truth maps. */
  extra?: Map<string, Uint8Array>;
  /** For report.html: fat-fraction-weighted centre of the fat (m along read, phase), ROI, wrap landing zones, check lines. */
  fatCentroid?: { u: number; v: number } | null;
  roi?: LogicalRect;
  folds?: LogicalRect[];
  checks?: CheckItem[];
  /** Renders report.html's plots (default vega on this thread; the command line may hand them to a worker thread). */
  plots?: PlotRenderer;
  /** The picture and plots already under way ({@link startRunFolderPlots}), instead of starting them here. */
  started?: StartedPlots;
}

/** The magnitude picture in display order and report.html's plots of it, under way. */
export interface StartedPlots {
  mag: { values: Float64Array; width: number; height: number };
  plots: Promise<{ title: string; svg: string }[]>;
}

/** The image grid of report.html's profiles: samples and spacing (m) along read and phase. */
function imageGrid(r: Pick<RunFolderInput, "image" | "voxelMm">): { nRead: number; nPhase: number; dRead: number; dPhase: number } {
  return { nRead: r.image.read, nPhase: r.image.phase, dRead: r.voxelMm[0] / 1e3, dPhase: r.voxelMm[1] / 1e3 };
}

/** Starts report.html's plots of a result (e.g. on a renderer of another thread, before the rest of the folder is made). */
export function startRunFolderPlots(r: Pick<RunFolderInput, "image" | "magnitude" | "affine" | "voxelMm">, render?: PlotRenderer): StartedPlots {
  const t = displayTransform(axesFromAffine(r.affine));
  const mag = toDisplayInPlace(t, centralPlaneMagnitude(r.image, false, r.magnitude), r.image.read, r.image.phase);
  const grid = imageGrid(r);
  const plots = profilePlots(t, grid, mag, render);
  plots.catch(() => {}); // awaited (and reported) by writeRunFolder
  return { mag, plots };
}

/** Logical axes (RAS+ unit vectors) from the columns of the voxel affine. */
export function axesFromAffine(affine: number[][]): { read: Vec3; phase: Vec3; slice: Vec3 } {
  const col = (j: number): Vec3 => {
    const v: Vec3 = [affine[0]![j]!, affine[1]![j]!, affine[2]![j]!];
    const n = Math.hypot(...v);
    return n > 0 ? [v[0] / n, v[1] / n, v[2] / n] : v;
  };
  return { read: col(0), phase: col(1), slice: col(2) };
}

/** The report.json `display` section of a transform. */
export function displaySection(t: DisplayTransform, files: string[]): Record<string, unknown> {
  return {
    convention: t.convention, orientation: t.orientation, rows: t.rows, cols: t.cols,
    horizontal: t.horizontal, vertical: t.vertical,
    letters: t.letters,
    fromArray: { transpose: t.transpose, flipRows: t.flipRows, flipCols: t.flipCols,
      meaning: "display = array plane [phase][read], transposed first if transpose (columns then follow phase), then rows and/or columns reversed" },
    files,
    arrays: ".npy and NIfTI files keep their documented index order (axes section); only pictures are turned",
  };
}

function shape(v: Volume): number[] {
  return [v.coils, v.slice, v.phase, v.read];
}

/**
 * Magnitude of the first coil's central slice-encoding step, row-major [phase][read] (a new array): a copy
 * of that plane of `magnitude` (|v| in v's layout) where given, else Math.hypot of each sample, the same numbers.
 */
function centralPlaneMagnitude(v: Volume, log: boolean, magnitude?: Float64Array): Float64Array {
  const plane = v.phase * v.read;
  const p = Math.floor(v.slice / 2);
  const re = v.re.subarray(p * plane, (p + 1) * plane);
  const im = v.im.subarray(p * plane, (p + 1) * plane);
  if (log) return logMagnitude(re, im);
  if (magnitude) return magnitude.slice(p * plane, (p + 1) * plane);
  return hypotOf(re, im, new Float64Array(plane));
}

/** out[i] = Math.hypot(re[i], im[i]) for every i of out (typed arrays only: one compiled loop for every run). */
function hypotOf<T extends Float64Array | Float32Array>(re: Float64Array, im: Float64Array, out: T): T {
  for (let i = 0; i < out.length; i++) out[i] = Math.hypot(re[i]!, im[i]!);
  return out;
}

/** Writes the run folder atomically; resolves to the list of files written. */
export async function writeRunFolder(dir: string, r: RunFolderInput): Promise<string[]> {
  const stage = new OutputStage(dir);
  let plots: Promise<{ title: string; svg: string }[]> | null = null;
  try {
    const t = displayTransform(axesFromAffine(r.affine));
    const grid = imageGrid(r);
    // the plots first: a renderer on another thread draws them while the files below are encoded
    const started = r.started ?? startRunFolderPlots(r, r.plots);
    const mag = started.mag;
    plots = started.plots;
    stage.addInBackground("kspace.npy", encodeNpy({ dtype: "complex64", shape: shape(r.kspace), data: { re: r.kspace.re, im: r.kspace.im } }));
    stage.addInBackground("image.npy", encodeNpy({ dtype: "complex64", shape: shape(r.image), data: { re: r.image.re, im: r.image.im } }));
    const png = encodeGrayPng(mag.values, mag.width, mag.height);
    stage.addInBackground("image.png", png.png);
    const kmag = toDisplayInPlace(t, centralPlaneMagnitude(r.kspace, true), r.kspace.read, r.kspace.phase);
    const kpng = encodeGrayPng(kmag.values, kmag.width, kmag.height, { percentile: 100 }).png;
    stage.addInBackground("kspace.png", kpng);
    // NIfTI: magnitude of coil 0 (or the combined image), x = read fastest, y = phase, z = slice-encoding step
    const n = r.image.slice * r.image.phase * r.image.read;
    const data = r.magnitude ? Float32Array.from(r.magnitude.subarray(0, n)) : hypotOf(r.image.re, r.image.im, new Float32Array(n));
    stage.addInBackground("image.nii", encodeNifti1({
      data, dims: [r.image.read, r.image.phase, r.image.slice], voxelMm: r.voxelMm, affine: r.affine,
      description: "isofold simulated magnitude image",
    }));
    for (const [name, bytes] of r.extra ?? []) stage.addInBackground(name, bytes);
    (r.report as { window?: unknown }).window = { imagePng: { low: png.low, high: png.high } };
    const pngs = ["image.png", "kspace.png", ...[...(r.extra?.keys() ?? [])].filter((n) => n.endsWith(".png"))];
    r.report.display = displaySection(t, pngs);
    stage.addInBackground("report.json", JSON.stringify(r.report, null, 2) + "\n");
    stage.addInBackground("report.html", await runReportHtml({
      report: r.report, display: t,
      image: { png: png.png, values: mag.values, width: mag.width, height: mag.height },
      kspace: { png: kpng, width: kmag.width, height: kmag.height },
      grid, plots, fatCentroid: r.fatCentroid, roi: r.roi, folds: r.folds, checks: r.checks,
    }));
    await stage.commitAsync();
    return stage.staged;
  } catch (e) {
    plots?.catch(() => {}); // the error below is the one to report
    await stage.settle();
    stage.abort();
    throw e;
  }
}
