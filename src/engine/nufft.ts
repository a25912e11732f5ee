/**
 * A one-dimensional type-1 non-uniform FFT with the exponential-of-semicircle
 * ("ES") kernel of Barnett, Magland & af Klinteberg (2019, SIAM J. Sci.
 * Comput. 41:C479, "A parallel nonuniform fast Fourier transform library
 * based on an exponential of semicircle kernel"):
 *
 *   f_j = Σ_p c_p · exp(−i2π·j·x_p),   j = 0 … n−1,   x_p real (cycles per step),
 *
 * for any number of points, at O(points·w + n·log n) instead of points × n.
 *
 * The sum is periodic in x with period 1, so x is taken modulo 1. With
 * h = ⌊n/2⌋ and k = j − h the outputs are the centred frequencies
 * k ∈ [−h, n − h) of the modulated strengths c_p·exp(−i2π·h·x_p). Each
 * strength is spread onto a grid of M ≥ 2n points (upsampling σ ≥ 2) with
 * ψ(x) = φ(x·M/(w/2)), φ(z) = exp(β(√(1 − z²) − 1)) on |z| ≤ 1 and β = 2.30·w;
 * the grid's FFT divided by M·ψ̂(k) gives f. ψ̂ is integrated numerically once
 * per plan. The width w = ⌈log10(1/ε)⌉ + 1 gives a relative error near ε (below 3ε in the tests)
 * (the paper's rule for σ = 2); test/nufft.test.ts checks it against the
 * direct sum.
 */
import { getPlan, type FFTPlan } from "../recon/fft.js";

/** Kernel width (grid points) for a relative error ε, 2 … 16. */
export function esWidth(eps: number): number {
  if (!(eps > 0)) return 16;
  return Math.min(16, Math.max(2, Math.ceil(Math.log10(1 / eps)) + 1));
}

/** The plan of one output length n and kernel width w (deconvolution factors, grid, FFT). */
export class Nufft1 {
  readonly n: number;
  readonly w: number;
  /** Grid length M: a power of two ≥ 2n and ≥ 2w. */
  readonly M: number;
  readonly beta: number;
  /** 1 / (M·ψ̂(k)) for output j (k = j − ⌊n/2⌋). */
  private readonly deconv: Float64Array;
  private readonly fft: FFTPlan;
  /** Per point (set by setPoints): first grid index, w kernel values, modulation exp(−i2π·h·x). */
  private first = new Int32Array(0);
  private kern = new Float64Array(0);
  private modRe = new Float64Array(0);
  private modIm = new Float64Array(0);
  private count = 0;

  constructor(n: number, w: number) {
    this.n = n;
    this.w = w;
    let M = 2;
    while (M < 2 * n || M < 2 * w) M *= 2;
    this.M = M;
    this.beta = 2.3 * w;
    this.fft = getPlan(M);
    // M·ψ̂(k) = (w/2)·∫_{−1}^{1} φ(z)·cos(π·k·w·z/M) dz, by composite Simpson on [0, 1] (φ is even)
    const Q = 2000, hq = 1 / Q, h = Math.floor(n / 2);
    const phi = new Float64Array(Q + 1);
    for (let q = 0; q <= Q; q++) phi[q] = this.phi(q * hq);
    this.deconv = new Float64Array(n);
    for (let j = 0; j < n; j++) {
      const a = (Math.PI * (j - h) * w) / M;
      let s = 0;
      for (let q = 0; q <= Q; q++) {
        const c = q === 0 || q === Q ? 1 : q % 2 === 1 ? 4 : 2;
        s += c * phi[q]! * Math.cos(a * q * hq);
      }
      this.deconv[j] = 1 / ((w / 2) * 2 * (s * hq) / 3);
    }
  }

  /** φ(z) = exp(β(√(1 − z²) − 1)), 0 outside |z| ≤ 1. */
  private phi(z: number): number {
    const t = 1 - z * z;
    return t > 0 ? Math.exp(this.beta * (Math.sqrt(t) - 1)) : 0;
  }

  /**
   * Sets the points x[0 … m−1] (cycles per step) for the transforms that
   * follow: their kernel values are evaluated once and reused for every set
   * of strengths.
   */
  setPoints(x: Float64Array, m: number): void {
    const w = this.w, M = this.M, half = w / 2, h = Math.floor(this.n / 2);
    if (this.first.length < m) {
      this.first = new Int32Array(m);
      this.kern = new Float64Array(m * w);
      this.modRe = new Float64Array(m);
      this.modIm = new Float64Array(m);
    }
    for (let p = 0; p < m; p++) {
      const xf = x[p]! - Math.floor(x[p]!); // in [0, 1)
      const t = xf * M, i0 = Math.ceil(t - half);
      this.first[p] = i0;
      for (let s = 0; s < w; s++) this.kern[p * w + s] = this.phi((i0 + s - t) / half);
      // exp(−i2π·h·x): the phase of h·x reduced modulo 1 first (exact for integer h)
      const ph = h * xf - Math.floor(h * xf);
      this.modRe[p] = Math.cos(2 * Math.PI * ph);
      this.modIm[p] = -Math.sin(2 * Math.PI * ph);
    }
    this.count = m;
  }

  /** f_j = Σ_p c_p·exp(−i2π·j·x_p) for the points set last; writes outRe/outIm[0 … n−1]. */
  transform(cRe: Float64Array, cIm: Float64Array, outRe: Float64Array, outIm: Float64Array): void {
    const w = this.w, M = this.M, mask = M - 1, m = this.count, n = this.n, h = Math.floor(n / 2);
    const g = this.fft.input, first = this.first, kern = this.kern, modRe = this.modRe, modIm = this.modIm;
    g.fill(0);
    for (let p = 0; p < m; p++) {
      const ar = cRe[p]!, ai = cIm[p]!, mr = modRe[p]!, mi = modIm[p]!;
      const cr = ar * mr - ai * mi, ci = ar * mi + ai * mr;
      const i0 = first[p]!, ko = p * w;
      for (let s = 0; s < w; s++) {
        const k = kern[ko + s]!, o = 2 * ((i0 + s) & mask);
        g[o] = g[o]! + cr * k;
        g[o + 1] = g[o + 1]! + ci * k;
      }
    }
    this.fft.execute(-1);
    const out = this.fft.output, d = this.deconv;
    for (let j = 0; j < n; j++) {
      const o = 2 * ((j - h + M) & mask);
      outRe[j] = out[o]! * d[j]!;
      outIm[j] = out[o + 1]! * d[j]!;
    }
  }
}

const plans = new Map<string, Nufft1>();

/** The shared plan of length n and width w. */
export function nufft1Plan(n: number, w: number): Nufft1 {
  const k = `${n}|${w}`;
  let p = plans.get(k);
  if (!p) {
    p = new Nufft1(n, w);
    plans.set(k, p);
  }
  return p;
}
