/**
 * Discrete Fourier transforms for isofold: FFT plans of any length, and the
 * centred transforms between k-space and image space.
 *
 * Complex data are held as two separate Float64Arrays, `re` and `im`, in every
 * public function. Plans use fft.js (radix-4, power-of-two lengths) and, for
 * other lengths, Bluestein's chirp-z algorithm on a power-of-two fft.js plan:
 *   L. I. Bluestein, "A linear filtering approach to the computation of the
 *   discrete Fourier transform", IEEE Trans. Audio Electroacoust. 18 (1970)
 *   451–455; L. R. Rabiner, R. W. Schafer, C. M. Rader, "The chirp
 *   z-transform algorithm", IEEE Trans. Audio Electroacoust. 17 (1969) 86–92.
 *
 * ## Centred DFT convention (the one place it is defined)
 *
 * For an axis of N samples let c = floor(N/2).
 *
 *   k-space index m = 0..N−1  ↔  k = (m − c)·Δk      (cycles/m)
 *   image index   n = 0..N−1  ↔  x = (n − c)·Δx      (m),  Δk·Δx = 1/N
 *
 * so k = 0 and x = 0 sit at index c (the centre for even N, the middle sample
 * for odd N). The signal model is s(k) = Σ_r m(r)·exp(−i2π k·r). Then
 *
 *   reconstruction (k-space → image, `ifft*c`):
 *     image[n] = (1/N) · Σ_m s[m] · exp(+i2π (m − c)(n − c) / N)
 *   forward (image → k-space, `fft*c`), the adjoint of the above without 1/N:
 *     s[m]     =         Σ_n image[n] · exp(−i2π (m − c)(n − c) / N)
 *
 * A point of weight w at the centre of pixel n0, s[m] = w·exp(−i2π(m−c)(n0−c)/N),
 * reconstructs to exactly w at n0 and 0 elsewhere; fft then ifft is the
 * identity. Multi-dimensional transforms apply this along every axis (the
 * factor 1/N per axis). Because (m−c)(n−c) only matters modulo N, each axis is
 * computed as: roll the input left by c (ifftshift), plain DFT, roll the
 * output right by c (fftshift); this holds for odd N as well.
 */
import FFT from "fft.js";

/** Sign of the exponent of a DFT: −1 forward, +1 inverse (unnormalised). */
export type FFTSign = -1 | 1;

function isPowerOfTwo(n: number): boolean {
  return n >= 2 && (n & (n - 1)) === 0;
}

function nextPowerOfTwo(n: number): number {
  let p = 2;
  while (p < n) p *= 2;
  return p;
}

/**
 * A DFT plan for one length n (any positive integer), holding its twiddles,
 * chirp and scratch so that a transform allocates nothing.
 *
 * Low-level use: write the input interleaved (re, im, re, im, …) into
 * {@link FFTPlan.input}, call {@link FFTPlan.execute}, read
 * {@link FFTPlan.output}. `execute` may overwrite `input`.
 *
 * A plan is not re-entrant (its scratch is shared between calls); within one
 * thread that is never an issue. Use {@link getPlan} to share plans.
 */
export class FFTPlan {
  /** Transform length. */
  readonly n: number;
  /** Interleaved complex input scratch, length 2n. May be clobbered by execute. */
  readonly input: Float64Array;
  /** Interleaved complex output scratch, length 2n. */
  readonly output: Float64Array;

  /** fft.js plan of length n (power of two) or m (Bluestein), null for n = 1. */
  private readonly core: FFT | null;
  /** Bluestein convolution length m ≥ 2n − 1 (power of two); 0 if unused. */
  private readonly m: number;
  /** Chirp w[j] = exp(−iπ j²/n), interleaved, length 2n (Bluestein only). */
  private readonly chirp: Float64Array;
  /** FFT of the conjugate chirp kernel, pre-scaled by 1/m, interleaved, length 2m. */
  private readonly kernelHat: Float64Array;
  /** Bluestein scratch, interleaved, length 2m each. */
  private readonly bufA: Float64Array;
  private readonly bufB: Float64Array;

  /**
   * @param n transform length, a positive integer.
   * @throws RangeError if n is not a positive safe integer.
   */
  constructor(n: number) {
    if (!Number.isSafeInteger(n) || n < 1) {
      throw new RangeError(`FFT length must be a positive integer, got ${n}`);
    }
    this.n = n;
    this.input = new Float64Array(2 * n);
    this.output = new Float64Array(2 * n);
    if (n === 1) {
      this.core = null;
      this.m = 0;
      this.chirp = new Float64Array(0);
      this.kernelHat = new Float64Array(0);
      this.bufA = new Float64Array(0);
      this.bufB = new Float64Array(0);
    } else if (isPowerOfTwo(n)) {
      this.core = new FFT(n);
      this.m = 0;
      this.chirp = new Float64Array(0);
      this.kernelHat = new Float64Array(0);
      this.bufA = new Float64Array(0);
      this.bufB = new Float64Array(0);
    } else {
      // Bluestein: kn = (k² + n² − (k−n)²)/2, so with w[j] = exp(−iπ j²/N)
      //   X[k] = Σ_j x[j] exp(−i2π kj/N) = w[k] · Σ_j (x[j] w[j]) · conj(w[k−j]),
      // a linear convolution of length 2N−1 done as a cyclic one of length m.
      const m = nextPowerOfTwo(2 * n - 1);
      this.m = m;
      this.core = new FFT(m);
      const chirp = new Float64Array(2 * n);
      const twoN = 2 * n;
      for (let j = 0; j < n; j++) {
        // j² mod 2N keeps the angle small and exact for large j.
        const q = (j * j) % twoN;
        const ang = (Math.PI * q) / n;
        chirp[2 * j] = Math.cos(ang);
        chirp[2 * j + 1] = -Math.sin(ang);
      }
      this.chirp = chirp;
      // kernel b[j] = conj(w[j]) for j = 0..N−1 and b[m−j] = b[j] for j = 1..N−1.
      const b = new Float64Array(2 * m);
      const inv = 1 / m;
      for (let j = 0; j < n; j++) {
        const br = chirp[2 * j]! * inv;
        const bi = -chirp[2 * j + 1]! * inv;
        b[2 * j] = br;
        b[2 * j + 1] = bi;
        if (j > 0) {
          b[2 * (m - j)] = br;
          b[2 * (m - j) + 1] = bi;
        }
      }
      this.kernelHat = new Float64Array(2 * m);
      this.core.transform(this.kernelHat, b);
      this.bufA = new Float64Array(2 * m);
      this.bufB = new Float64Array(2 * m);
    }
  }

  /**
   * Transforms {@link FFTPlan.input} into {@link FFTPlan.output} (both
   * interleaved): output[k] = Σ_j input[j]·exp(sign·i2π kj/n), unnormalised.
   * `input` may be overwritten.
   */
  execute(sign: FFTSign): void {
    const n = this.n;
    const inp = this.input;
    const out = this.output;
    if (n === 1) {
      out[0] = inp[0]!;
      out[1] = inp[1]!;
      return;
    }
    const core = this.core as FFT;
    // fft.js computes the forward (−) transform; the + transform is
    // conj(FFT(conj(x))), done by negating imaginary parts on the way in and out.
    if (sign === 1) {
      for (let j = 1; j < 2 * n; j += 2) inp[j] = -inp[j]!;
    }
    if (this.m === 0) {
      core.transform(out, inp);
    } else {
      this.bluestein(out, inp, core);
    }
    if (sign === 1) {
      for (let j = 1; j < 2 * n; j += 2) out[j] = -out[j]!;
    }
  }

  /**
   * As {@link FFTPlan.execute} with the input read from `src` (interleaved,
   * length 2n, left unchanged; a view of a larger array saves copying it into
   * {@link FFTPlan.input}): the same numbers as copying it there and executing.
   */
  executeFrom(src: Float64Array, sign: FFTSign): void {
    if (sign === -1 && this.m === 0 && this.core) {
      this.core.transform(this.output, src);
      return;
    }
    this.input.set(src.subarray(0, 2 * this.n));
    this.execute(sign);
  }

  /** Forward (−) DFT of interleaved `inp` into `out` by Bluestein's algorithm. */
  private bluestein(out: Float64Array, inp: Float64Array, core: FFT): void {
    const n = this.n;
    const m = this.m;
    const w = this.chirp;
    const a = this.bufA;
    const ah = this.bufB;
    const bh = this.kernelHat;
    // a[j] = x[j]·w[j], zero-padded to m.
    for (let j = 0; j < n; j++) {
      const xr = inp[2 * j]!;
      const xi = inp[2 * j + 1]!;
      const wr = w[2 * j]!;
      const wi = w[2 * j + 1]!;
      a[2 * j] = xr * wr - xi * wi;
      a[2 * j + 1] = xr * wi + xi * wr;
    }
    a.fill(0, 2 * n);
    core.transform(ah, a);
    // Pointwise product with the kernel spectrum (already /m), conjugated so
    // that a second forward FFT gives the conjugate of the inverse FFT.
    for (let j = 0; j < 2 * m; j += 2) {
      const pr = ah[j]!;
      const pi = ah[j + 1]!;
      const qr = bh[j]!;
      const qi = bh[j + 1]!;
      a[j] = pr * qr - pi * qi;
      a[j + 1] = -(pr * qi + pi * qr);
    }
    core.transform(ah, a);
    // X[k] = w[k] · conj(ah[k]).
    for (let k = 0; k < n; k++) {
      const cr = ah[2 * k]!;
      const ci = -ah[2 * k + 1]!;
      const wr = w[2 * k]!;
      const wi = w[2 * k + 1]!;
      out[2 * k] = cr * wr - ci * wi;
      out[2 * k + 1] = cr * wi + ci * wr;
    }
  }

  /**
   * Unnormalised DFT of length n:
   *   out[k] = Σ_{j=0}^{n−1} in[j] · exp(sign · i2π k j / n).
   * Reads the first n values of inRe/inIm, writes the first n of outRe/outIm.
   * `out` may alias `in` (in-place): the input is copied to plan scratch first.
   */
  transform(
    outRe: Float64Array,
    outIm: Float64Array,
    inRe: Float64Array,
    inIm: Float64Array,
    sign: FFTSign,
  ): void {
    const n = this.n;
    if (inRe.length < n || inIm.length < n || outRe.length < n || outIm.length < n) {
      throw new RangeError(`FFT of length ${n} needs arrays of at least ${n} values`);
    }
    const inp = this.input;
    for (let j = 0; j < n; j++) {
      inp[2 * j] = inRe[j]!;
      inp[2 * j + 1] = inIm[j]!;
    }
    this.execute(sign);
    const out = this.output;
    for (let k = 0; k < n; k++) {
      outRe[k] = out[2 * k]!;
      outIm[k] = out[2 * k + 1]!;
    }
  }
}

const planCache = new Map<number, FFTPlan>();

/** Returns the shared plan of length n, creating it on first use. */
export function getPlan(n: number): FFTPlan {
  let plan = planCache.get(n);
  if (plan === undefined) {
    plan = new FFTPlan(n);
    planCache.set(n, plan);
  }
  return plan;
}

/** Index of k = 0 (or x = 0) on an axis of n samples: c = floor(n/2). */
export function centreIndex(n: number): number {
  return Math.floor(n / 2);
}

/**
 * The strided centred-transform kernel that all `fft*c`/`ifft*c` use, in place
 * on one line of n complex values at re/im[offset + j·stride], j = 0..n−1:
 *   y[p] = scale · Σ_q x[q] · exp(sign · i2π (q − c)(p − c) / n),  c = floor(n/2).
 * sign = +1, scale = 1/n is the reconstruction; sign = −1, scale = 1 the forward.
 */
export function centredLine(
  re: Float64Array,
  im: Float64Array,
  n: number,
  stride: number,
  offset: number,
  sign: FFTSign,
  scale: number,
): void {
  const plan = getPlan(n);
  const buf = plan.input;
  const c = n >> 1;
  // ifftshift on load: buf[j] = x[(j + c) mod n].
  let q = c;
  for (let j = 0; j < n; j++) {
    const idx = offset + q * stride;
    buf[2 * j] = re[idx]!;
    buf[2 * j + 1] = im[idx]!;
    q++;
    if (q === n) q = 0;
  }
  plan.execute(sign);
  const out = plan.output;
  // fftshift on store: y[(j + c) mod n] = out[j].
  let p = c;
  for (let j = 0; j < n; j++) {
    const idx = offset + p * stride;
    re[idx] = out[2 * j]! * scale;
    im[idx] = out[2 * j + 1]! * scale;
    p++;
    if (p === n) p = 0;
  }
}

function checkStrided(re: Float64Array, im: Float64Array, n: number, stride: number, offset: number): void {
  if (!Number.isSafeInteger(n) || n < 1) throw new RangeError(`invalid length ${n}`);
  if (!Number.isSafeInteger(stride) || stride < 1) throw new RangeError(`invalid stride ${stride}`);
  if (!Number.isSafeInteger(offset) || offset < 0) throw new RangeError(`invalid offset ${offset}`);
  const last = offset + (n - 1) * stride;
  if (last >= re.length || last >= im.length) {
    throw new RangeError(`line of ${n} values at offset ${offset}, stride ${stride} exceeds array length`);
  }
}

/**
 * Centred 1D reconstruction in place (see the convention at the top of this
 * file): x[p] ← (1/n)·Σ_q x[q]·exp(+i2π(q−c)(p−c)/n) on re/im[offset + j·stride].
 */
export function ifftc1(re: Float64Array, im: Float64Array, n: number, stride = 1, offset = 0): void {
  checkStrided(re, im, n, stride, offset);
  centredLine(re, im, n, stride, offset, 1, 1 / n);
}

/**
 * Centred 1D forward transform in place (adjoint of ifftc1 without 1/n):
 * x[p] ← Σ_q x[q]·exp(−i2π(q−c)(p−c)/n) on re/im[offset + j·stride].
 */
export function fftc1(re: Float64Array, im: Float64Array, n: number, stride = 1, offset = 0): void {
  checkStrided(re, im, n, stride, offset);
  centredLine(re, im, n, stride, offset, -1, 1);
}

function checkSize(re: Float64Array, im: Float64Array, dims: number[]): void {
  let total = 1;
  for (const d of dims) {
    if (!Number.isSafeInteger(d) || d < 1) throw new RangeError(`invalid dimension ${d} in [${dims.join(", ")}]`);
    total *= d;
  }
  if (re.length !== total || im.length !== total) {
    throw new RangeError(
      `arrays of length ${re.length}/${im.length} do not match dimensions [${dims.join(", ")}] (${total} values)`,
    );
  }
}

/** Applies the centred transform along every axis of a row-major array, last axis fastest. */
function centredND(re: Float64Array, im: Float64Array, dims: number[], sign: FFTSign): void {
  checkSize(re, im, dims);
  const total = re.length;
  let stride = 1;
  for (let axis = dims.length - 1; axis >= 0; axis--) {
    const n = dims[axis]!;
    const block = stride * n;
    const scale = sign === 1 ? 1 / n : 1;
    if (n > 1) {
      for (let outer = 0; outer < total; outer += block) {
        for (let inner = 0; inner < stride; inner++) {
          centredLine(re, im, n, stride, outer + inner, sign, scale);
        }
      }
    }
    stride = block;
  }
}

/**
 * Centred 2D reconstruction in place on row-major data [rows][cols]
 * (rows = phase, cols = read):
 *   img[r][q] = 1/(R·C) · Σ_{a,b} s[a][b] · exp(+i2π((a−cR)(r−cR)/R + (b−cC)(q−cC)/C)).
 */
export function ifft2c(re: Float64Array, im: Float64Array, rows: number, cols: number): void {
  centredND(re, im, [rows, cols], 1);
}

/** Centred 2D forward transform in place on row-major [rows][cols]; adjoint of ifft2c without 1/(R·C). */
export function fft2c(re: Float64Array, im: Float64Array, rows: number, cols: number): void {
  centredND(re, im, [rows, cols], -1);
}

/** Centred 3D reconstruction in place on row-major [nz][ny][nx] (x fastest); factor 1/(nz·ny·nx). */
export function ifft3c(re: Float64Array, im: Float64Array, nz: number, ny: number, nx: number): void {
  centredND(re, im, [nz, ny, nx], 1);
}

/** Centred 3D forward transform in place on row-major [nz][ny][nx]; adjoint of ifft3c without the scale. */
export function fft3c(re: Float64Array, im: Float64Array, nz: number, ny: number, nx: number): void {
  centredND(re, im, [nz, ny, nx], -1);
}
