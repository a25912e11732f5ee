/**
 * Thermal noise: circularly symmetric complex Gaussian samples with a coil
 * noise covariance. Ψ (coils × coils, Hermitian, positive definite) is either
 * built from one correlation coefficient between neighbouring elements or
 * read from a file; the noise added to every k-space sample is
 *   n = σ·L·z,  Ψ = L·Lᴴ (Cholesky),  z ~ CN(0, I) (E|z_c|² = 1),
 * so E[n·nᴴ] = σ²·Ψ. σ comes from the target SNR (see snrSigma).
 */
import { SNR_FIELD_EXPONENT } from "../constants.js";
import { UserError } from "../errors.js";
import { decodeNpy } from "../io/npy.js";
import type { CoilArray } from "./coils.js";
import type { Rng } from "./prng.js";

/** A complex square matrix, row-major, separate re/im. */
export interface CMatrix {
  n: number;
  re: Float64Array;
  im: Float64Array;
}

export function identity(n: number): CMatrix {
  const m = { n, re: new Float64Array(n * n), im: new Float64Array(n * n) };
  for (let i = 0; i < n; i++) m.re[i * n + i] = 1;
  return m;
}

/**
 * Ψ with ones on the diagonal and `rho` between neighbouring elements: the
 * previous and next loop of the same row (around the ring; elements ≥ 2) and
 * the same element in the adjacent rows; 0 elsewhere. The uniform coil gets [[1]].
 */
export function neighbourCovariance(a: CoilArray, rho: number): CMatrix {
  if (a.elements === 0) return identity(1);
  const n = a.elements * a.rows;
  const m = identity(n);
  const set = (i: number, j: number) => {
    if (i === j) return;
    m.re[i * n + j] = rho;
    m.re[j * n + i] = rho;
  };
  for (let r = 0; r < a.rows; r++) {
    for (let j = 0; j < a.elements; j++) {
      const i = r * a.elements + j;
      if (a.elements >= 2) set(i, r * a.elements + ((j + 1) % a.elements));
      if (r + 1 < a.rows) set(i, (r + 1) * a.elements + j);
    }
  }
  return m;
}

/**
 * Cholesky factor L (lower triangular, real positive diagonal) of a
 * Hermitian matrix; throws a UserError naming `option` if it is not
 * Hermitian or not positive definite.
 */
export function cholesky(m: CMatrix, option: string): CMatrix {
  const n = m.n;
  let scale = 0;
  for (let i = 0; i < n * n; i++) scale = Math.max(scale, Math.hypot(m.re[i]!, m.im[i]!));
  for (let i = 0; i < n; i++) {
    for (let j = 0; j <= i; j++) {
      const dr = m.re[i * n + j]! - m.re[j * n + i]!, di = m.im[i * n + j]! + m.im[j * n + i]!;
      if (Math.hypot(dr, di) > 1e-9 * scale) {
        throw new UserError(`the noise covariance is not Hermitian: entry [${i}][${j}] is not the conjugate of [${j}][${i}]; give a Hermitian positive-definite matrix`, undefined, option);
      }
    }
  }
  const L = { n, re: new Float64Array(n * n), im: new Float64Array(n * n) };
  for (let j = 0; j < n; j++) {
    let d = m.re[j * n + j]!;
    for (let k = 0; k < j; k++) d -= L.re[j * n + k]! ** 2 + L.im[j * n + k]! ** 2;
    if (!(d > 1e-12 * scale)) {
      throw new UserError(
        `the noise covariance is not positive definite (Cholesky pivot ${j} is ${d.toPrecision(3)}); ` +
          (option === "--noise-correlation"
            ? "for a neighbour correlation ρ of a ring of elements use |ρ| < 0.5 (rows of loops need a smaller |ρ|)"
            : "give a Hermitian positive-definite matrix (every eigenvalue > 0), e.g. ones on the diagonal and |correlations| well below 1"),
        undefined, option,
      );
    }
    const ljj = Math.sqrt(d);
    L.re[j * n + j] = ljj;
    for (let i = j + 1; i < n; i++) {
      let sr = m.re[i * n + j]!, si = m.im[i * n + j]!;
      for (let k = 0; k < j; k++) {
        // − L_ik·conj(L_jk)
        const ar = L.re[i * n + k]!, ai = L.im[i * n + k]!, br = L.re[j * n + k]!, bi = -L.im[j * n + k]!;
        sr -= ar * br - ai * bi;
        si -= ar * bi + ai * br;
      }
      L.re[i * n + j] = sr / ljj;
      L.im[i * n + j] = si / ljj;
    }
  }
  return L;
}

/**
 * Ψ from the bytes of a file named `file` (the CLI reads it): .npy (real or
 * complex, shape [coils, coils]) or JSON (a list of rows of numbers, or
 * {"re": rows, "im": rows}). Errors name `option`.
 */
export function parseCovariance(bytes: Uint8Array, file: string, coils: number, option: string): CMatrix {
  const m = { n: coils, re: new Float64Array(coils * coils), im: new Float64Array(coils * coils) };
  const want = `a ${coils}×${coils} matrix (one row and column per coil)`;
  if (file.toLowerCase().endsWith(".npy")) {
    let arr;
    try {
      arr = decodeNpy(bytes, file);
    } catch (e) {
      throw new UserError(`${file}: ${(e as Error).message}`, undefined, option);
    }
    if (arr.shape.length !== 2 || arr.shape[0] !== coils || arr.shape[1] !== coils) {
      throw new UserError(`${file} has shape [${arr.shape.join(", ")}]; expected ${want}`, undefined, option);
    }
    if (arr.dtype === "complex64" || arr.dtype === "complex128") {
      m.re.set(arr.data.re);
      m.im.set(arr.data.im);
    } else {
      const d = arr.data as ArrayLike<number>;
      for (let i = 0; i < coils * coils; i++) m.re[i] = Number(d[i]);
    }
  } else {
    let json: unknown;
    try {
      json = JSON.parse(new TextDecoder().decode(bytes));
    } catch {
      throw new UserError(`${file} is neither .npy nor valid JSON; expected ${want} as .npy, or JSON rows [[...], ...] or {"re": rows, "im": rows}`, undefined, option);
    }
    const o = json as { re?: unknown; im?: unknown };
    const parts: [unknown, Float64Array][] = Array.isArray(json) ? [[json, m.re]] : [[o.re, m.re], [o.im ?? null, m.im]];
    for (const [rows, dest] of parts) {
      if (rows === null) continue;
      if (!Array.isArray(rows) || rows.length !== coils || rows.some((r) => !Array.isArray(r) || r.length !== coils || r.some((v: unknown) => typeof v !== "number" || !Number.isFinite(v)))) {
        throw new UserError(`${file}: expected ${want} of finite numbers`, undefined, option);
      }
      (rows as number[][]).forEach((r, i) => r.forEach((v, j) => (dest[i * coils + j] = v)));
    }
  }
  return m;
}

/**
 * Adds σ·L·z to every sample of k-space laid out [coil][sample] (perCoil
 * samples per coil). Samples are visited in order; per sample one CN(0, 1)
 * deviate per coil is drawn (real then imaginary part, each N(0, 1/2)).
 */
export function addNoise(re: Float64Array, im: Float64Array, coils: number, perCoil: number, sigma: number, L: CMatrix, rng: Rng): void {
  const zr = new Float64Array(coils), zi = new Float64Array(coils);
  const h = Math.SQRT1_2 * sigma;
  for (let s = 0; s < perCoil; s++) {
    for (let c = 0; c < coils; c++) {
      zr[c] = rng.normal() * h;
      zi[c] = rng.normal() * h;
    }
    for (let i = 0; i < coils; i++) {
      let ar = 0, ai = 0;
      for (let k = 0; k <= i; k++) {
        const lr = L.re[i * coils + k]!, li = L.im[i * coils + k]!;
        ar += lr * zr[k]! - li * zi[k]!;
        ai += lr * zi[k]! + li * zr[k]!;
      }
      re[i * perCoil + s] = re[i * perCoil + s]! + ar;
      im[i * perCoil + s] = im[i * perCoil + s]! + ai;
    }
  }
}

/**
 * Noise standard deviation σ (E|n|² per k-space sample of a coil with
 * Ψ_cc = 1) for a target SNR, with isofold's definition:
 *   SNR = A / (σ/√N),
 * A = mean of |truth| over the object pixels (|truth| ≥ 0.1·max|truth|),
 * N = number of image-grid points (the DFT size); σ/√N is the complex
 * standard deviation of a pixel of the image reconstructed (centred inverse
 * DFT with 1/N) from one coil's noise alone. So σ = A·√N / SNR.
 */
export function snrSigma(truthRe: Float64Array, truthIm: Float64Array, snr: number): { sigma: number; meanSignal: number; objectPixels: number } {
  let max = 0;
  const n = truthRe.length;
  for (let i = 0; i < n; i++) max = Math.max(max, Math.hypot(truthRe[i]!, truthIm[i]!));
  let sum = 0, count = 0;
  for (let i = 0; i < n; i++) {
    const a = Math.hypot(truthRe[i]!, truthIm[i]!);
    if (a >= 0.1 * max && a > 0) {
      sum += a;
      count++;
    }
  }
  const A = count > 0 ? sum / count : 0;
  return { sigma: (A * Math.sqrt(n)) / snr, meanSignal: A, objectPixels: count };
}

/**
 * Physical noise model: the quantities of a protocol that set the image SNR
 * of one coil (Ψ_cc = 1) for a given object, apart from the signal itself.
 *   SNR ∝ V · √T_acq · B0^β,  T_acq = averages × phase lines × slice-encoding steps × readout duration
 * (voxel volume times the square root of the total sampling time: W. A.
 * Edelstein, G. H. Glover, C. J. Hardy, R. W. Redington, "The intrinsic
 * signal-to-noise ratio in NMR imaging", Magn. Reson. Med. 3 (1986) 604–618,
 * from memory; common practice). β = FIELD_EXPONENT = 1: sample-noise-dominated regime of
 * D. I. Hoult and R. E. Richards, "The signal-to-noise ratio of the nuclear
 * magnetic resonance experiment", J. Magn. Reson. 24 (1976) 71–85, the usual
 * assumption at clinical field strengths (common practice).
 */
export const FIELD_EXPONENT = SNR_FIELD_EXPONENT;

export interface SnrFactors {
  /** Voxel volume (m³) of the image grid. */
  voxel: number;
  /** Total sampling time (s): averages × phase lines (with phase oversampling) × slice-encoding steps × readout duration. */
  acquisition: number;
  /** B0 (T). */
  field: number;
}

export function snrFactor(f: SnrFactors): number {
  return f.voxel * Math.sqrt(f.acquisition) * f.field ** FIELD_EXPONENT;
}

/**
 * σ (per k-space sample on the image grid of `points` points, as in snrSigma)
 * of a protocol, given the reference: its mean object signal A_ref, its SNR
 * and its factors. The image noise of one coil, σ_img = σ/√N, scales as
 * 1/snrFactor; at the reference σ_img,ref = A_ref/SNR_ref. The noise does not
 * depend on the case's own signal (contrast), only on how it is sampled.
 */
export function physicalSigma(ref: { meanSignal: number; snr: number; factors: SnrFactors }, own: SnrFactors, points: number): number {
  const sigmaImgRef = ref.meanSignal / ref.snr;
  return sigmaImgRef * (snrFactor(ref.factors) / snrFactor(own)) * Math.sqrt(points);
}
