/**
 * One dataset case from its simulated coil k-spaces (dataset/simulate.ts,
 * run by the caller): move to the image grid, build the truth,
 * sensitivities, noise and mask, and encode the files. No file system, no
 * engine executor: runs anywhere the library runs.
 *
 * Data path (all on the image grid, i.e. after oversampling removal):
 *   I_c   = crop(ifftc(k_c))                 coil images, c = 0 uniform, 1…C array
 *   truth[0] = I_0                           noise-free image, uniform coil
 *   truth[1] = Σ_c conj(S_c)·I_c / Σ_c |S_c|²   coil combination with the saved
 *              sensitivities (SENSE at R = 1 with identity noise covariance,
 *              K. P. Pruessmann et al., "SENSE: sensitivity encoding for fast
 *              MRI", Magn. Reson. Med. 42 (1999) 952–962); 0 where Σ|S|² = 0
 *   kspace_c = (fftc(I_c) + n_c)·mask        n from noise.ts, zero off the mask
 *
 * Averages (raw.h5 only; kspace.npy is their mean): the engine sums the A
 * averages of a line into one line with weight 1/A, so every average record
 * carries that mean signal, plus noise of its own, n_a = n + (w_a − w̄) with
 * w_a = √A·σ·L·z_a (z_a ~ CN(0, I), a = 0 … A−1, stream averageNoise) and
 * w̄ their mean: each n_a has covariance A·σ²·Ψ, the n_a are independent of
 * one another (jointly Gaussian, pairwise covariance σ² − σ² = 0), and their
 * mean is exactly n, the noise of kspace.npy.
 */
import { encodeNpy } from "../io/npy.js";
import { encodeNifti1 } from "../io/nifti.js";
import { fft2c, fft3c } from "../recon/fft.js";
import { reconstructGrid, toGrid } from "../recon/reconstruct.js";
import type { KGrid, Sequence } from "../sequence/types.js";
import { sliceStepCentre } from "../sequence/common.js";

export { sliceStepCentre };
import type { Axes } from "../protocol/geometry.js";
import { coilCount, sensitivitiesAt, type CoilArray } from "./coils.js";
import { addNoise, cholesky, snrSigma, type CMatrix } from "./noise.js";
import { makeMask, type Mask, type MaskOptions } from "./masks.js";
import { Rng, STREAM } from "./prng.js";
import type { ReadoutReport } from "../engine/fast.js";
import type { KSpace } from "../engine/index.js";
import { addRawNoise, rawFile, rawSignal, type RawContext } from "./raw.js";

/** Which raw k-space containers a case gets: kspace.npy (+ noise.npy), raw.h5 (ISMRMRD), or both. */
export type DatasetFormat = "npy" | "ismrmrd" | "both";
export const DATASET_FORMATS = ["npy", "ismrmrd", "both"] as const;

export interface Dims {
  slice: number;
  phase: number;
  read: number;
}

/**
 * Coil images on the image grid: per coil the sequence's own reconstruction
 * (acquired rows onto the full k-space grid — reversed rows turned round —
 * then the centred inverse DFT over phase and read, and slice-encoding steps for 3D,
 * and the central image matrix kept), as for a simulate run.
 */
export function toImageGrid(re: Float64Array, im: Float64Array, coils: number, k: Dims, img: Dims, grid: KGrid): { re: Float64Array; im: Float64Array } {
  const kn = k.slice * k.phase * k.read, n = img.slice * img.phase * img.read;
  const out = { re: new Float64Array(coils * n), im: new Float64Array(coils * n) };
  for (let c = 0; c < coils; c++) {
    const acq = { ...k, re: re.subarray(c * kn, (c + 1) * kn), im: im.subarray(c * kn, (c + 1) * kn) };
    const v = reconstructGrid(toGrid(acq, grid), grid, img);
    out.re.set(v.re, c * n);
    out.im.set(v.im, c * n);
  }
  return out;
}

/** Centred forward DFT of each coil's image (in place), the adjoint of the reconstruction without 1/N. */
export function toKspace(re: Float64Array, im: Float64Array, coils: number, d: Dims): void {
  const n = d.slice * d.phase * d.read;
  for (let c = 0; c < coils; c++) {
    const r = re.subarray(c * n, (c + 1) * n), i = im.subarray(c * n, (c + 1) * n);
    if (d.slice > 1) fft3c(r, i, d.slice, d.phase, d.read);
    else fft2c(r, i, d.phase, d.read);
  }
}

/**
 * Physical position (m) of every image pixel centre: in plane, index n along
 * an axis of N points sits at (n − floor(N/2))·Δ; along the slice normal,
 * slice-encoding step p at {@link sliceStepCentre}.
 */
export function pixelCentres(axes: Axes, d: Dims, dx: number, dy: number, dz: number, position: number): { x: Float64Array; y: Float64Array; z: Float64Array } {
  const n = d.slice * d.phase * d.read;
  const x = new Float64Array(n), y = new Float64Array(n), z = new Float64Array(n);
  for (let p = 0; p < d.slice; p++) {
    const w = sliceStepCentre(p, d.slice, dz, position);
    for (let j = 0; j < d.phase; j++) {
      const v = (j - Math.floor(d.phase / 2)) * dy;
      for (let i = 0; i < d.read; i++) {
        const u = (i - Math.floor(d.read / 2)) * dx, k = (p * d.phase + j) * d.read + i;
        x[k] = axes.read[0] * u + axes.phase[0] * v + axes.slice[0] * w;
        y[k] = axes.read[1] * u + axes.phase[1] * v + axes.slice[1] * w;
        z[k] = axes.read[2] * u + axes.phase[2] * v + axes.slice[2] * w;
      }
    }
  }
  return { x, y, z };
}

export interface CaseSettings {
  array: CoilArray;
  /** Normalised coil noise covariance Ψ (coils × coils). */
  psi: CMatrix;
  /** Target SNR, or null for noise-free k-space. */
  snr: number | null;
  /** σ set by the physical noise model (overrides snr). */
  sigma?: number;
  /** Noise-only samples per coil to write as noise.npy (0 = none), each a readout of `read` samples. */
  noiseLines: number;
  mask: MaskOptions;
  seed: number;
  /** Raw containers to write (default both). */
  format?: DatasetFormat;
  /** Needed for raw.h5. */
  raw?: RawContext;
  /** Text for the raw.h5 header's user parameter "isofold". */
  rawComment?: string;
}

export interface CaseGeometry {
  axes: Axes;
  dx: number;
  dy: number;
  dz: number;
  position: number;
  /** 3×4 voxel → RAS+ mm affine for truth.nii and voxel size (mm). */
  affine: number[][];
  voxelMm: [number, number, number];
}

export interface CaseResult {
  files: Map<string, Uint8Array | string>;
  /** Numbers for case.json. */
  info: {
    coils: number;
    dims: Dims;
    sigma: number;
    meanSignal: number;
    objectPixels: number;
    mask: Mask;
    kspaceAcquired: Dims;
    /** What the readout operator did, one report per engine run (coil blocks). */
    readout: ReadoutReport[];
    /** Records per sampled line in raw.h5 (protocol averages; 1 without raw.h5). */
    averages: number;
  };
}

/**
 * Builds every array file of one case (case.json is added by the caller) from
 * the coils' simulated k-space [coil][row][read] (coil 0 uniform, then the
 * array: simulateCoilsPlanned) and what the readout operator did.
 */
export function buildCase(
  seq: Sequence, sim: { kspace: KSpace; readout: ReadoutReport[] }, geo: CaseGeometry, s: CaseSettings, caseIndex: number,
): CaseResult {
  const img: Dims = seq.image, kd: Dims = seq.kspace;
  const C = coilCount(s.array);
  const loops = s.array.elements > 0;
  const { kspace: k, readout } = sim;
  const n = img.slice * img.phase * img.read;
  const format = s.format ?? "both";
  const wantRaw = format !== "npy";
  if (wantRaw && !s.raw) throw new Error("buildCase: raw.h5 needs the raw context");
  const raw = wantRaw ? rawSignal(k.re, k.im, loops ? 1 : 0, C, kd, img, seq.grid) : null;
  // raw.h5 records per sampled line: one per average (noise-free: each the same mean signal)
  const averages = raw ? s.raw!.protocol.averages : 1;
  const raws: { re: Float64Array; im: Float64Array; read: number }[] = raw ? Array.from({ length: averages }, () => raw) : [];
  const all = toImageGrid(k.re, k.im, k.coils, kd, img, seq.grid);
  // truth[0]: uniform coil; coil images of the array follow (or the uniform coil itself)
  const truth = { re: new Float64Array(2 * n), im: new Float64Array(2 * n) };
  truth.re.set(all.re.subarray(0, n));
  truth.im.set(all.im.subarray(0, n));
  const coilRe = loops ? all.re.slice(n) : all.re.slice(0, n);
  const coilIm = loops ? all.im.slice(n) : all.im.slice(0, n);
  // sensitivities at pixel centres
  const sens = new Float64Array(2 * C * n);
  const pc = pixelCentres(geo.axes, img, geo.dx, geo.dy, geo.dz, geo.position);
  sensitivitiesAt(s.array, pc.x, pc.y, pc.z, n, sens, n, 0);
  // truth[1] = Σ conj(S)·I / Σ|S|²
  for (let i = 0; i < n; i++) {
    let ar = 0, ai = 0, w = 0;
    for (let c = 0; c < C; c++) {
      const sr = sens[2 * (c * n + i)]!, si = sens[2 * (c * n + i) + 1]!;
      const xr = coilRe[c * n + i]!, xi = coilIm[c * n + i]!;
      ar += sr * xr + si * xi;
      ai += sr * xi - si * xr;
      w += sr * sr + si * si;
    }
    truth.re[n + i] = w > 0 ? ar / w : 0;
    truth.im[n + i] = w > 0 ? ai / w : 0;
  }
  // k-space on the image grid, noise, mask
  toKspace(coilRe, coilIm, C, img);
  const stats = s.snr === null && s.sigma === undefined ? { sigma: 0, meanSignal: 0, objectPixels: 0 } : snrSigma(truth.re.subarray(0, n), truth.im.subarray(0, n), s.snr ?? 1);
  const { meanSignal, objectPixels } = stats;
  const sigma = s.sigma ?? stats.sigma;
  const L = cholesky(s.psi, "--noise-covariance");
  if (sigma > 0) {
    // noise drawn into its own buffer, then added: the same sums as adding in place (0 + a = a exactly)
    const nr = new Float64Array(C * n), ni = new Float64Array(C * n);
    addNoise(nr, ni, C, n, sigma, L, Rng.stream(s.seed, caseIndex, STREAM.noise));
    for (let i = 0; i < C * n; i++) {
      coilRe[i] = coilRe[i]! + nr[i]!;
      coilIm[i] = coilIm[i]! + ni[i]!;
    }
    if (raw && averages > 1) {
      // per-average noise n_a = n + (w_a − w̄) (file header), then each average's raw lines from it
      const wr = new Float64Array(averages * C * n), wi = new Float64Array(averages * C * n);
      const wrng = Rng.stream(s.seed, caseIndex, STREAM.averageNoise), mrng = Rng.stream(s.seed, caseIndex, STREAM.averageMargin);
      for (let a = 0; a < averages; a++) addNoise(wr.subarray(a * C * n, (a + 1) * C * n), wi.subarray(a * C * n, (a + 1) * C * n), C, n, sigma * Math.sqrt(averages), L, wrng);
      const mr = new Float64Array(C * n), mi = new Float64Array(C * n);
      for (let a = 0; a < averages; a++) for (let i = 0; i < C * n; i++) { mr[i] = mr[i]! + wr[a * C * n + i]! / averages; mi[i] = mi[i]! + wi[a * C * n + i]! / averages; }
      const ar = new Float64Array(C * n), ai = new Float64Array(C * n);
      for (let a = 0; a < averages; a++) {
        for (let i = 0; i < C * n; i++) { ar[i] = nr[i]! + (wr[a * C * n + i]! - mr[i]!); ai[i] = ni[i]! + (wi[a * C * n + i]! - mi[i]!); }
        const own = { re: raw.re.slice(), im: raw.im.slice(), read: raw.read };
        addRawNoise(own.re, own.im, ar, ai, C, img.slice * img.phase, img.read, raw.read, sigma * Math.sqrt(averages), L, mrng);
        raws[a] = own;
      }
    } else if (raw) addRawNoise(raw.re, raw.im, nr, ni, C, img.slice * img.phase, img.read, raw.read, sigma, L, Rng.stream(s.seed, caseIndex, STREAM.rawMargin));
  }
  const mask = makeMask(img.slice, img.phase, s.mask, Rng.stream(s.seed, caseIndex, STREAM.mask));
  for (let c = 0; c < C; c++) {
    for (let p = 0; p < img.slice; p++) {
      for (let y = 0; y < img.phase; y++) {
        if (mask.data[p * img.phase + y]) continue;
        const o = c * n + (p * img.phase + y) * img.read;
        coilRe.fill(0, o, o + img.read);
        coilIm.fill(0, o, o + img.read);
      }
    }
  }
  const shape = [C, img.slice, img.phase, img.read];
  const files = new Map<string, Uint8Array | string>();
  if (format !== "ismrmrd") files.set("kspace.npy", encodeNpy({ dtype: "complex64", shape, data: { re: coilRe, im: coilIm } }));
  files.set("mask.npy", encodeNpy({ dtype: "uint8", shape: [img.slice, img.phase], data: mask.data }));
  const sr = new Float64Array(C * n), si = new Float64Array(C * n);
  for (let i = 0; i < C * n; i++) {
    sr[i] = sens[2 * i]!;
    si[i] = sens[2 * i + 1]!;
  }
  files.set("sensitivities.npy", encodeNpy({ dtype: "complex64", shape, data: { re: sr, im: si } }));
  files.set("truth.npy", encodeNpy({ dtype: "complex64", shape: [2, img.slice, img.phase, img.read], data: truth }));
  const cov = { re: new Float64Array(C * C), im: new Float64Array(C * C) };
  for (let i = 0; i < C * C; i++) {
    cov.re[i] = sigma * sigma * s.psi.re[i]!;
    cov.im[i] = sigma * sigma * s.psi.im[i]!;
  }
  files.set("noise_covariance.npy", encodeNpy({ dtype: "complex64", shape: [C, C], data: cov }));
  let noiseRaw: { re: Float64Array; im: Float64Array; lines: number } | null = null;
  if (s.noiseLines > 0) {
    const m = s.noiseLines * img.read;
    const nr = new Float64Array(C * m), ni = new Float64Array(C * m);
    addNoise(nr, ni, C, m, sigma, L, Rng.stream(s.seed, caseIndex, STREAM.noiseLines));
    if (format !== "ismrmrd") files.set("noise.npy", encodeNpy({ dtype: "complex64", shape: [C, s.noiseLines, img.read], data: { re: nr, im: ni } }));
    if (raw) {
      const M = raw.read;
      noiseRaw = { re: new Float64Array(C * s.noiseLines * M), im: new Float64Array(C * s.noiseLines * M), lines: s.noiseLines };
      addRawNoise(noiseRaw.re, noiseRaw.im, nr, ni, C, s.noiseLines, img.read, M, sigma, L, Rng.stream(s.seed, caseIndex, STREAM.rawNoiseLinesMargin));
    }
  }
  if (raw) files.set("raw.h5", rawFile(s.raw!, raws, noiseRaw, C, img, mask, s.rawComment ?? "isofold dataset case"));
  const mag = new Float32Array(n);
  for (let i = 0; i < n; i++) mag[i] = Math.hypot(truth.re[i]!, truth.im[i]!);
  files.set("truth.nii", encodeNifti1({
    data: mag, dims: [img.read, img.phase, img.slice], voxelMm: geo.voxelMm, affine: geo.affine,
    description: "isofold dataset truth: |uniform-coil image|",
  }));
  return { files, info: { coils: C, dims: img, sigma, meanSignal, objectPixels, mask, kspaceAcquired: kd, readout, averages } };
}
