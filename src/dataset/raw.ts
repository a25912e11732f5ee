/**
 * The readouts of one case as a scanner would store them (for raw.h5):
 * read oversampling kept, one readout of M = grid.read samples per acquired
 * (slice-encoding step, phase line), and how they relate to kspace.npy.
 *
 * Per coil c, slice-encoding step p and image phase line y, in the hybrid
 * space (k along phase and slice-encoding steps, image along read):
 *   h_raw[x] = ifftc_M(raw line)[x],        x = 0 … M−1 (read oversampled)
 *   h_npy[x] = ifftc_N(kspace.npy line)[x], x = 0 … N−1
 *   h_raw[x + o] = h_npy[x],  o = floor(M/2) − floor(N/2)   (the crop the
 *   simulator and ismrmrd_recon_cartesian_2d both apply)
 * with ifftc the centred inverse DFT with 1/n (recon/fft.ts). So the raw line
 * is the simulated readout, and its noise is the kspace.npy noise inside the
 * read field of view plus independent noise of the same per-pixel variance
 * (σ²/N, coil covariance Ψ) in the oversampled margin; per raw sample the
 * noise is σ²·M/N·Ψ (the wider sampled bandwidth at the same readout
 * duration). Phase oversampling, if the protocol has any, is removed: lines
 * are on the image phase grid. With A averages every sampled line has A
 * records (`average` 0 … A−1, one after another): the noise-free signal of
 * each is the engine's mean over the averages, the noise of each its own
 * (case.ts), and their mean is the kspace.npy line by the relation above.
 * Reversed readouts (EPI) are turned round into k-space order.
 */
import { fftc1, ifftc1 } from "../recon/fft.js";
import { toGrid } from "../recon/reconstruct.js";
import { GAMMA_BAR } from "../constants.js";
import { encodeIsmrmrd, ismrmrdXml, type Acquisition, type AcqFlag } from "../io/ismrmrd.js";
import type { Axes } from "../protocol/geometry.js";
import type { Protocol } from "../protocol/types.js";
import type { KGrid, Sequence } from "../sequence/types.js";
import type { Dims } from "./case.js";
import type { Mask, MaskOptions } from "./masks.js";
import { addNoise, type CMatrix } from "./noise.js";
import type { Rng } from "./prng.js";

/**
 * Raw signal lines [coil][slice-encoding step][image phase line][M] from the
 * simulated k-space [coil][acquired rows][acquired samples] (coils
 * `first` … `first + C − 1` of it): onto the full grid, phase oversampling
 * removed along phase (inverse DFT over the acquired lines, central lines
 * kept, forward DFT over the image lines); the read axis is left as acquired.
 */
export function rawSignal(re: Float64Array, im: Float64Array, first: number, C: number, kd: Dims, img: Dims, grid: KGrid): { re: Float64Array; im: Float64Array; read: number } {
  const M = grid.read, kn = kd.slice * kd.phase * kd.read, P = img.slice, N = img.phase, Nf = kd.phase;
  const out = { re: new Float64Array(C * P * N * M), im: new Float64Array(C * P * N * M), read: M };
  const off = Math.floor(Nf / 2) - Math.floor(N / 2);
  for (let c = 0; c < C; c++) {
    const g = toGrid({ ...kd, re: re.subarray((first + c) * kn, (first + c + 1) * kn), im: im.subarray((first + c) * kn, (first + c + 1) * kn) }, grid);
    if (Nf !== N) {
      for (let p = 0; p < P; p++) for (let x = 0; x < M; x++) ifftc1(g.re, g.im, Nf, M, p * Nf * M + x);
    }
    for (let p = 0; p < P; p++) {
      for (let y = 0; y < N; y++) {
        const src = (p * Nf + y + off) * M, dst = ((c * P + p) * N + y) * M;
        out.re.set(g.re.subarray(src, src + M), dst);
        out.im.set(g.im.subarray(src, src + M), dst);
      }
    }
    if (Nf !== N) {
      for (let p = 0; p < P; p++) for (let x = 0; x < M; x++) fftc1(out.re, out.im, N, M, ((c * P + p) * N) * M + x);
    }
  }
  return out;
}

/**
 * Noise of raw lines from image-grid noise lines: `noise` [coil][line][N]
 * (as added to kspace.npy, or noise.npy) → [coil][line][M] added to `raw`
 * (same layout). In-band part exactly the given noise (see file header),
 * margin drawn from `rng` with per-pixel variance σ²/N and covariance Ψ = L·Lᴴ.
 */
export function addRawNoise(
  rawRe: Float64Array, rawIm: Float64Array, noiseRe: Float64Array, noiseIm: Float64Array,
  C: number, lines: number, N: number, M: number, sigma: number, L: CMatrix, rng: Rng,
): void {
  const o = Math.floor(M / 2) - Math.floor(N / 2), margin = M - N;
  const hr = new Float64Array(C * M), hi = new Float64Array(C * M);
  const mr = new Float64Array(C * margin), mi = new Float64Array(C * margin);
  for (let l = 0; l < lines; l++) {
    hr.fill(0); hi.fill(0);
    if (margin > 0) {
      mr.fill(0); mi.fill(0);
      addNoise(mr, mi, C, margin, sigma / Math.sqrt(N), L, rng);
    }
    for (let c = 0; c < C; c++) {
      const a = (c * lines + l) * N;
      const lr = noiseRe.slice(a, a + N), li = noiseIm.slice(a, a + N);
      ifftc1(lr, li, N);
      hr.set(lr, c * M + o);
      hi.set(li, c * M + o);
      for (let x = 0, k = 0; x < M; x++) {
        if (x >= o && x < o + N) continue;
        hr[c * M + x] = mr[c * margin + k]!;
        hi[c * M + x] = mi[c * margin + k]!;
        k++;
      }
      fftc1(hr, hi, M, 1, c * M);
      const b = (c * lines + l) * M;
      for (let x = 0; x < M; x++) {
        rawRe[b + x] = rawRe[b + x]! + hr[c * M + x]!;
        rawIm[b + x] = rawIm[b + x]! + hi[c * M + x]!;
      }
    }
  }
}

/** Bits and pieces of the protocol the raw file header needs. */
export interface RawContext {
  protocol: Protocol;
  seq: Sequence;
  axes: Axes;
  mask: MaskOptions;
}

/** RAS+ (ours) → the ISMRMRD/DICOM patient frame LPS (x toward the left, y posterior, z head; common practice). */
function lps(v: readonly number[], scale = 1): [number, number, number] {
  return [-v[0]! * scale, -v[1]! * scale, v[2]! * scale];
}

/** Acquisition order of the image phase lines: the sequence's phase table mapped onto the image grid, missing lines appended. */
export function lineOrder(seq: Sequence, N: number): number[] {
  const off = Math.floor(seq.kspace.phase / 2) - Math.floor(N / 2);
  const seen = new Set<number>(), order: number[] = [];
  for (const e of seq.phaseTable ?? []) {
    const y = e.line - off;
    if (y >= 0 && y < N && !seen.has(y)) { seen.add(y); order.push(y); }
  }
  for (let y = 0; y < N; y++) if (!seen.has(y)) order.push(y);
  return order;
}

/**
 * raw.h5 bytes: header from the protocol; noise-only readouts first (if any,
 * [coil][line][M]); then one readout per sampled (slice-encoding step, phase
 * line) and average (`raws[a]`, a = 0 … A−1), slice-encoding steps outer,
 * phase lines in acquisition order, the averages of a line one after another.
 * First/last in encode step 1 and first/last in average mark each average's
 * first and last line of a slice-encoding step.
 */
export function rawFile(
  ctx: RawContext, raws: { re: Float64Array; im: Float64Array; read: number }[], noise: { re: Float64Array; im: Float64Array; lines: number } | null,
  C: number, img: Dims, mask: Mask, comment: string,
): Uint8Array {
  const { protocol: p, seq, axes } = ctx;
  const M = raws[0]!.read, P = img.slice, N = img.phase, A = raws.length;
  const dwellUs = 1e6 / (p.pixelBandwidth * p.matrix.read * p.oversampling.read);
  const posMm = lps(axes.slice, p.slice.position * 1e3);
  const common = {
    samples: M, channels: C, centerSample: Math.floor(M / 2), sampleTimeUs: dwellUs,
    position: posMm, readDir: lps(axes.read), phaseDir: lps(axes.phase), sliceDir: lps(axes.slice),
  };
  const acqs: Acquisition[] = [];
  const line = (src: { re: Float64Array; im: Float64Array }, lines: number, l: number) => {
    const re = new Float64Array(C * M), im = new Float64Array(C * M);
    for (let c = 0; c < C; c++) {
      re.set(src.re.subarray((c * lines + l) * M, (c * lines + l + 1) * M), c * M);
      im.set(src.im.subarray((c * lines + l) * M, (c * lines + l + 1) * M), c * M);
    }
    return { re, im };
  };
  const zero = { kspaceEncodeStep1: 0, kspaceEncodeStep2: 0, average: 0, slice: 0, repetition: 0 };
  for (let l = 0; l < (noise?.lines ?? 0); l++) {
    acqs.push({ ...common, ...line(noise!, noise!.lines, l), flags: ["noiseMeasurement"], scanCounter: acqs.length, idx: zero });
  }
  const order = lineOrder(seq, N);
  const m = ctx.mask, undersampled = m.kind !== "full" && m.acs > 0;
  const c0 = Math.floor(N / 2), a0 = c0 - Math.floor(m.acs / 2);
  const acsP = m.kind === "poisson" ? Math.min(m.acs, P) : P, p0 = m.kind === "poisson" ? Math.floor(P / 2) - Math.floor(acsP / 2) : 0;
  const imaging: Acquisition[] = [];
  for (let pz = 0; pz < P; pz++) {
    const group: Acquisition[] = [];
    for (const y of order) {
      if (!mask.data[pz * N + y]) continue;
      const flags: AcqFlag[] = [];
      if (undersampled && y >= a0 && y < a0 + m.acs && pz >= p0 && pz < p0 + acsP) {
        flags.push("parallelCalibration");
        const onLattice = m.kind !== "uniform" || (((y - c0) % m.accel) + m.accel) % m.accel === 0;
        if (onLattice) flags.push("parallelCalibrationAndImaging");
      }
      for (let a = 0; a < A; a++) {
        group.push({
          ...common, ...line(raws[a]!, P * N, pz * N + y), flags: [...flags], scanCounter: 0,
          idx: { ...zero, kspaceEncodeStep1: y, kspaceEncodeStep2: pz, average: a },
        });
      }
    }
    for (let a = 0; a < A; a++) {
      const own = group.filter((g) => g.idx.average === a);
      if (own.length === 0) continue;
      own[0]!.flags.push("firstInEncodeStep1");
      own[own.length - 1]!.flags.push("lastInEncodeStep1");
    }
    imaging.push(...group);
  }
  for (let a = 0; a < A; a++) {
    const own = imaging.filter((g) => g.idx.average === a);
    if (own.length === 0) continue;
    own[0]!.flags.push("firstInAverage");
    own[own.length - 1]!.flags.push("lastInAverage");
  }
  if (imaging.length > 0) {
    imaging[0]!.flags.push("firstInEncodeStep2", "firstInSlice", "firstInRepetition");
    imaging[imaging.length - 1]!.flags.push("lastInEncodeStep2", "lastInSlice", "lastInRepetition", "lastInMeasurement");
  }
  for (const a of imaging) acqs.push({ ...a, scanCounter: acqs.length });
  const undersampling = mask.acceleration > 1 && m.kind !== "full";
  const xml = ismrmrdXml({
    fieldT: p.field, h1Hz: GAMMA_BAR * p.field, channels: C,
    trajectory: p.sequence === "epi" ? "epi" : "cartesian",
    encoded: { x: M, y: N, z: P, fovMm: [p.fov.read * p.oversampling.read * 1e3, p.fov.phase * 1e3, p.slice.thickness * P * 1e3] },
    recon: { x: img.read, y: N, z: P, fovMm: [p.fov.read * 1e3, p.fov.phase * 1e3, p.slice.thickness * P * 1e3] },
    limits: { read: [M - 1, Math.floor(M / 2)], step1: [N - 1, Math.floor(N / 2)], step2: [P - 1, Math.floor(P / 2)], average: [A - 1, 0] },
    trMs: p.tr * 1e3, teMs: p.te * 1e3, flipDeg: (p.flip * 180) / Math.PI,
    ...(p.sequence === "rare" ? { echoTrainLength: p.echoTrainLength } : {}),
    ...(undersampling ? { parallel: { step1: Math.max(1, Math.round(m.accel)), step2: 1, ...(m.acs > 0 ? { calibration: "embedded" as const } : {}) } } : {}),
    comment,
  });
  return encodeIsmrmrd(xml, acqs);
}
