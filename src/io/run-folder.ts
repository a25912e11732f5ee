/**
 * The run folder contract (DEVELOPERS.md, Files): image.png, kspace.png, kspace.npy,
 * image.npy, image.nii, report.json — all staged under temporary names and
 * renamed together, so a killed run leaves no file under a final name.
 */
import { OutputStage } from "./atomic.js";
import { encodeNpy } from "./npy.js";
import { encodeNifti1 } from "./nifti.js";
import { encodeGrayPng, logMagnitude } from "./png.js";

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
  /** 3×4 affine (mm) from voxel (read, phase, slice-encoding step) index to RAS+ position. */
  affine: number[][];
  voxelMm: [number, number, number];
  report: Record<string, unknown>;
  /** Extra files (name → bytes), e.g. ground-truth maps. */
  extra?: Map<string, Uint8Array>;
}

function shape(v: Volume): number[] {
  return [v.coils, v.slice, v.phase, v.read];
}

/** Magnitude of the first coil's central slice-encoding step, row-major [phase][read]. */
function centralPlaneMagnitude(v: Volume, log: boolean): Float64Array {
  const plane = v.phase * v.read;
  const p = Math.floor(v.slice / 2);
  const re = v.re.subarray(p * plane, (p + 1) * plane);
  const im = v.im.subarray(p * plane, (p + 1) * plane);
  if (log) return logMagnitude(re, im);
  const out = new Float64Array(plane);
  for (let i = 0; i < plane; i++) out[i] = Math.hypot(re[i]!, im[i]!);
  return out;
}

/** Writes the run folder atomically; returns the list of files written. */
export function writeRunFolder(dir: string, r: RunFolderInput): string[] {
  const stage = new OutputStage(dir);
  try {
    stage.add("kspace.npy", encodeNpy({ dtype: "complex64", shape: shape(r.kspace), data: { re: r.kspace.re, im: r.kspace.im } }));
    stage.add("image.npy", encodeNpy({ dtype: "complex64", shape: shape(r.image), data: { re: r.image.re, im: r.image.im } }));
    const mag = centralPlaneMagnitude(r.image, false);
    const png = encodeGrayPng(mag, r.image.read, r.image.phase);
    stage.add("image.png", png.png);
    stage.add("kspace.png", encodeGrayPng(centralPlaneMagnitude(r.kspace, true), r.kspace.read, r.kspace.phase, { percentile: 100 }).png);
    // NIfTI: magnitude of coil 0 (or the combined image), x = read fastest, y = phase, z = slice-encoding step
    const n = r.image.slice * r.image.phase * r.image.read;
    const data = new Float32Array(n);
    for (let i = 0; i < n; i++) data[i] = Math.hypot(r.image.re[i]!, r.image.im[i]!);
    stage.add("image.nii", encodeNifti1({
      data, dims: [r.image.read, r.image.phase, r.image.slice], voxelMm: r.voxelMm, affine: r.affine,
      description: "isofold simulated magnitude image",
    }));
    for (const [name, bytes] of r.extra ?? []) stage.add(name, bytes);
    (r.report as { window?: unknown }).window = { imagePng: { low: png.low, high: png.high } };
    stage.add("report.json", JSON.stringify(r.report, null, 2) + "\n");
    stage.commit();
    return stage.staged;
  } catch (e) {
    stage.abort();
    throw e;
  }
}
