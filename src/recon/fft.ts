/**
 * Discrete Fourier transforms for isofold: FFT plans of any length, and the
 * centred transforms between k-space and image space.
 *
 * Complex data are held as two separate Float64Arrays, `re` and `im`, in every
 * public function. Plans use fft.js's radix-4 transform for power-of-two
 * lengths (run by radix4Forward below: fft.js's schedule, twiddles and
 * arithmetic, the same numbers) and, for other lengths, Bluestein's chirp-z
 * algorithm on a power-of-two fft.js plan:
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
import { FIRST_COPY, FIRST_RADIX2, FIRST_RADIX4, fftSteps, type FftSteps } from "./fft-wasm.js";
import { kernelSwitch } from "../engine/wasm-asm.js";

/** Sign of the exponent of a DFT: −1 forward, +1 inverse (unnormalised). */
export type FFTSign = -1 | 1;

function isPowerOfTwo(n: number): boolean {
  return n >= 2 && (n & (n - 1)) === 0;
}

/**
 * Forward DFT of n = size/2 complex values (n a power of two ≥ 2) into `out`
 * (interleaved, length size): the radix-4 schedule and the arithmetic of
 * fft.js 4.0.4 (MIT licence; FFT.prototype._transform4 with its sign factor
 * 1, which multiplies exactly), so the same numbers bit for bit, with its
 * twiddle `table` and bit-reversal offsets `bitrev` (in doubles of an
 * interleaved input) and first-step width. Input element j is read at
 * src[so + j·ss] (real) and src[so + j·ss + 1] (imaginary): any stride, no
 * copy. Where only the elements j < nz can be non-zero (the others exactly
 * +0) and no input is −0, a radix-4 first step with nz ≤ n/4 has three zero
 * inputs per butterfly, whose four outputs are then its first input unchanged
 * (x ± 0 = x for x ≠ −0): they are copied, not computed.
 */
function radix4Forward(out: Float64Array, src: Float64Array, so: number, ss: number, size: number, width: number, bitrev: Int32Array, table: Float64Array, nz: number): void {
  firstSteps(out, 0, 0, 1, src, so, 0, ss, size, width, bitrev, nz);
  laterSteps(out, 0, size, width, table);
}

/**
 * radix4Forward's first step for `count` inputs at once: input g's element j
 * at src[so + g·gs + j·ss], its output at out[oo + g·os …] (interleaved,
 * length size). One sweep over the inputs' rows serves all of them (where
 * the inputs are neighbours in memory, each row is one cache line and one
 * page for all of them); each output gets the same numbers as alone.
 */
function firstSteps(out: Float64Array, oo: number, os: number, count: number, src: Float64Array, so: number, gs: number, ss: number, size: number, width: number, bitrev: Int32Array, nz: number): void {
  const step = 1 << width;
  const len = (size / step) << 1;
  if (len === 4) {
    const h = (step >> 1) * ss;
    for (let outOff = 0, t = 0; outOff < size; outOff += len, t++) {
      const r0 = so + (bitrev[t]! >> 1) * ss;
      for (let g = 0, o = oo + outOff, i0 = r0; g < count; g++, o += os, i0 += gs) {
        const i1 = i0 + h;
        const evenR = src[i0]!, evenI = src[i0 + 1]!, oddR = src[i1]!, oddI = src[i1 + 1]!;
        out[o] = evenR + oddR;
        out[o + 1] = evenI + oddI;
        out[o + 2] = evenR - oddR;
        out[o + 3] = evenI - oddI;
      }
    }
  } else if (4 * nz <= size >> 1) {
    for (let outOff = 0, t = 0; outOff < size; outOff += len, t++) {
      const r0 = so + (bitrev[t]! >> 1) * ss;
      for (let g = 0, o = oo + outOff, i0 = r0; g < count; g++, o += os, i0 += gs) {
        const ar = src[i0]!, ai = src[i0 + 1]!;
        out[o] = ar;
        out[o + 1] = ai;
        out[o + 2] = ar;
        out[o + 3] = ai;
        out[o + 4] = ar;
        out[o + 5] = ai;
        out[o + 6] = ar;
        out[o + 7] = ai;
      }
    }
  } else {
    const h = (step >> 1) * ss;
    for (let outOff = 0, t = 0; outOff < size; outOff += len, t++) {
      const r0 = so + (bitrev[t]! >> 1) * ss;
      for (let g = 0, o = oo + outOff, iA = r0; g < count; g++, o += os, iA += gs) {
        const iB = iA + h, iC = iB + h, iD = iC + h;
        const Ar = src[iA]!, Ai = src[iA + 1]!, Br = src[iB]!, Bi = src[iB + 1]!;
        const Cr = src[iC]!, Ci = src[iC + 1]!, Dr = src[iD]!, Di = src[iD + 1]!;
        const T0r = Ar + Cr, T0i = Ai + Ci, T1r = Ar - Cr, T1i = Ai - Ci;
        const T2r = Br + Dr, T2i = Bi + Di, T3r = Br - Dr, T3i = Bi - Di;
        out[o] = T0r + T2r;
        out[o + 1] = T0i + T2i;
        out[o + 2] = T1r + T3i;
        out[o + 3] = T1i - T3r;
        out[o + 4] = T0r - T2r;
        out[o + 5] = T0i - T2i;
        out[o + 6] = T1r - T3i;
        out[o + 7] = T1i + T3r;
      }
    }
  }
}

/** radix4Forward's twiddled steps after the first, in place on out[oo … oo + size) (the TypeScript twin of fft-wasm.ts). */
function laterSteps(out: Float64Array, oo: number, size: number, width: number, table: Float64Array): void {
  for (let step = (1 << width) >> 2; step >= 2; step >>= 2) {
    const len = (size / step) << 1;
    const q = len >>> 2;
    for (let outOff = oo; outOff < oo + size; outOff += len) {
      const limit = outOff + q;
      for (let A = outOff, k = 0; A < limit; A += 2, k += step) {
        const B = A + q, C = B + q, D = C + q;
        const Ar = out[A]!, Ai = out[A + 1]!, Br = out[B]!, Bi = out[B + 1]!;
        const Cr = out[C]!, Ci = out[C + 1]!, Dr = out[D]!, Di = out[D + 1]!;
        const tBr = table[k]!, tBi = table[k + 1]!;
        const MBr = Br * tBr - Bi * tBi, MBi = Br * tBi + Bi * tBr;
        const tCr = table[2 * k]!, tCi = table[2 * k + 1]!;
        const MCr = Cr * tCr - Ci * tCi, MCi = Cr * tCi + Ci * tCr;
        const tDr = table[3 * k]!, tDi = table[3 * k + 1]!;
        const MDr = Dr * tDr - Di * tDi, MDi = Dr * tDi + Di * tDr;
        const T0r = Ar + MCr, T0i = Ai + MCi, T1r = Ar - MCr, T1i = Ai - MCi;
        const T2r = MBr + MDr, T2i = MBi + MDi, T3r = MBr - MDr, T3i = MBi - MDi;
        out[A] = T0r + T2r;
        out[A + 1] = T0i + T2i;
        out[B] = T1r + T3i;
        out[B + 1] = T1i - T3r;
        out[C] = T0r - T2r;
        out[C + 1] = T0i - T2i;
        out[D] = T1r - T3i;
        out[D + 1] = T1i + T3r;
      }
    }
  }
}

/** fft.js's own twiddle table, bit-reversal offsets and first-step width of a plan (read once, as radix4Forward uses them). */
function radix4Tables(core: FFT): { table: Float64Array; bitrev: Int32Array; width: number } {
  const c = core as unknown as { table: number[]; _bitrev: number[]; _width: number };
  return { table: Float64Array.from(c.table), bitrev: Int32Array.from(c._bitrev), width: c._width };
}

/** Whether forwardBatch runs its later steps on the WebAssembly SIMD kernel where available (the default; the same bits either way). */
const fftWasmSwitch = kernelSwitch();

/** Switches forwardBatch's WebAssembly SIMD kernel on or off (plans switch at their next call); returns the previous setting. */
export function setFftWasm(on: boolean): boolean {
  return fftWasmSwitch.set(on);
}

/** Whether forwardBatch would use the WebAssembly SIMD kernel here now. */
export function fftWasmActive(): boolean {
  return fftWasmSwitch.on() && fftSteps(new Float64Array([1, 0, 1, 0]), 2, 1) !== null;
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
  /** A power-of-two n: fft.js's twiddles, bit-reversal offsets and first-step width, for radix4Forward. */
  private readonly r4: { table: Float64Array; bitrev: Int32Array; width: number } | null;
  /** forwardBatch's outputs (made on first use). */
  private batch: { f64: Float64Array; base: number; cap: number; steps: FftSteps | null } | null = null;

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
    this.r4 = null;
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
      this.r4 = radix4Tables(this.core);
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
    if (this.r4 !== null) {
      radix4Forward(out, inp, 0, 2, 2 * n, this.r4.width, this.r4.bitrev, this.r4.table, n);
    } else if (this.m === 0) {
      core.transform(out, inp);
    } else {
      this.bluestein(out, inp, core);
    }
    if (sign === 1) {
      for (let j = 1; j < 2 * n; j += 2) out[j] = -out[j]!;
    }
  }

  /**
   * Forward (−) DFT of the n complex values at src[so + j·ss] (real) and
   * src[so + j·ss + 1] (imaginary), j = 0 … n − 1, into
   * {@link FFTPlan.output}; `src` is left unchanged. With nz < n the caller
   * states that the values j ≥ nz are exactly +0 and none is −0 (a power of
   * two then skips the sums of zeros; the numbers are those of the full
   * transform). The same numbers as execute(−1) on the values copied into
   * {@link FFTPlan.input}.
   */
  forwardStrided(src: Float64Array, so: number, ss: number, nz: number): void {
    const r4 = this.r4;
    if (r4 !== null) {
      radix4Forward(this.output, src, so, ss, 2 * this.n, r4.width, r4.bitrev, r4.table, nz);
      return;
    }
    const inp = this.input;
    for (let j = 0; j < this.n; j++) {
      inp[2 * j] = src[so + j * ss]!;
      inp[2 * j + 1] = src[so + j * ss + 1]!;
    }
    this.execute(-1);
  }

  /**
   * Forward (−) DFTs of `count` inputs at once: input g's
   * element j at src[so + g·gs + j·ss] (real) and the next number
   * (imaginary), nz as in {@link FFTPlan.forwardStrided}. Returns the array
   * holding the outputs, output g at {@link FFTPlan.batchOffset}(g)
   * (interleaved, 2n numbers; valid until the next call). The numbers are
   * those of forwardStrided of each input. For a power of two n, the first step in one sweep over
   * the inputs' rows (inputs side by side in memory share each row's cache
   * line and page), the later steps on the WebAssembly SIMD kernel where
   * available and `wasm` (fft-wasm.ts, the same bits as its TypeScript twin).
   */
  forwardBatch(src: Float64Array, so: number, gs: number, ss: number, count: number, nz: number, wasm = true): Float64Array {
    const r4 = this.r4, size = 2 * this.n, b = this.batchBuffers(count, wasm && fftWasmSwitch.on());
    if (r4 === null) {
      // other lengths: one transform at a time, copied out
      for (let g = 0; g < count; g++) {
        this.forwardStrided(src, so + g * gs, ss, nz);
        b.f64.set(this.output, b.base + g * size);
      }
      return b.f64;
    }
    if (b.steps && src.buffer === b.f64.buffer) {
      // inputs in the kernel's own memory (an inputArea): the first step there too, the same numbers
      const step = 1 << r4.width, len = (size / step) << 1;
      const mode = len === 4 ? FIRST_RADIX2 : 4 * nz <= size >> 1 ? FIRST_COPY : FIRST_RADIX4;
      b.steps.first(b.steps.bufBytes, count, 8 * size, src.byteOffset + 8 * so, 8 * gs, 8 * ss, b.steps.bitrevBytes, size / len, 8 * len, 8 * (step >> 1) * ss, mode);
    } else firstSteps(b.f64, b.base, size, count, src, so, gs, ss, size, r4.width, r4.bitrev, nz);
    const step0 = (1 << r4.width) >> 2;
    if (step0 >= 2) {
      if (b.steps) b.steps.kernel.run(b.steps.bufBytes, count, 8 * size, step0, 0);
      else for (let g = 0; g < count; g++) laterSteps(b.f64, b.base + g * size, size, r4.width, r4.table);
    }
    return b.f64;
  }

  /** Input doubles of the last inputArea (its room stays reserved when the batch buffers are made anew). */
  private inputDoubles = 0;

  /** The inputArea's room counted in buffers of 2n doubles. */
  private inputPages(): number {
    return Math.ceil(this.inputDoubles / (2 * this.n));
  }

  /**
   * A zeroed array of `doubles` numbers in the memory of this plan's SIMD
   * kernel (a power-of-two length with WebAssembly SIMD on), or null: inputs
   * to {@link FFTPlan.forwardBatch} taken from it get the first step on the
   * kernel too (the same numbers). Valid until the next inputArea call or
   * batch of more than max(16, maxCount) inputs (then an input in it is read by the
   * TypeScript first step: still right, only slower). For one user at a time:
   * a plan of its own (not getPlan's shared one).
   */
  inputArea(doubles: number, maxCount = 16): Float64Array | null {
    if (this.r4 === null || !fftWasmSwitch.on()) return null;
    let b = this.batchBuffers(maxCount, true);
    if (!b.steps) return null;
    if (doubles > this.inputDoubles) {
      this.inputDoubles = doubles;
      this.batch = null;
      b = this.batchBuffers(maxCount, true);
      if (!b.steps) return null;
    }
    const at = b.base + 2 * this.n * b.cap;
    const v = b.f64.subarray(at, at + doubles);
    v.fill(0);
    return v;
  }

  /** Where output g of the last {@link FFTPlan.forwardBatch} starts in the array it returned. */
  batchOffset(g: number): number {
    return (this.batch?.base ?? 0) + 2 * this.n * g;
  }

  /** Buffers for `count` outputs: in the steps kernel's memory, or (without WebAssembly SIMD, or switched off) plain scratch. */
  private batchBuffers(count: number, wasm: boolean): { f64: Float64Array; base: number; cap: number; steps: FftSteps | null } {
    let b = this.batch;
    if (b === null || b.cap < count || (b.steps !== null) !== wasm) {
      const cap = Math.max(count, 16), r4 = this.r4;
      const steps = wasm && r4 !== null ? fftSteps(r4.table, this.n, cap + this.inputPages(), r4.bitrev) : null;
      b = steps
        ? { f64: steps.kernel.f64, base: steps.bufBytes / 8, cap, steps }
        : { f64: new Float64Array(2 * this.n * cap), base: 0, cap, steps: null };
      this.batch = b;
    }
    return b;
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
  // the + transform as execute(+1) makes it, conj(DFT−(conj(x))): imaginary parts times s = −1 on
  // the way in and out (exact), here in the shifts' copies
  const s = sign === 1 ? -1 : 1;
  // ifftshift on load: buf[j] = x[(j + c) mod n].
  let q = c;
  for (let j = 0; j < n; j++) {
    const idx = offset + q * stride;
    buf[2 * j] = re[idx]!;
    buf[2 * j + 1] = s * im[idx]!;
    q++;
    if (q === n) q = 0;
  }
  plan.forwardStrided(buf, 0, 2, n);
  const out = plan.output;
  // fftshift on store: y[(j + c) mod n] = out[j].
  let p = c;
  for (let j = 0; j < n; j++) {
    const idx = offset + p * stride;
    re[idx] = out[2 * j]! * scale;
    im[idx] = s * out[2 * j + 1]! * scale;
    p++;
    if (p === n) p = 0;
  }
}

/** Lines per forwardBatch call of {@link centredLines} (their loads share cache lines when the lines are neighbours). */
const LINES_PER_BATCH = 8;
/** centredLines' input scratch per length (LINES_PER_BATCH lines, interleaved). */
const linesScratch = new Map<number, Float64Array>();

/**
 * {@link centredLine} on `count` lines, line g at re/im[offset + g·step + j·stride]:
 * the same numbers line by line, the transforms made LINES_PER_BATCH at a
 * time by {@link FFTPlan.forwardBatch} (for a power of two on the
 * WebAssembly SIMD kernel where available), each batch's loads and stores
 * in one sweep along the lines.
 */
export function centredLines(
  re: Float64Array, im: Float64Array, n: number, stride: number, offset: number, count: number, step: number, sign: FFTSign, scale: number,
): void {
  const plan = getPlan(n);
  let buf = linesScratch.get(n);
  if (!buf) {
    buf = new Float64Array(2 * n * LINES_PER_BATCH);
    linesScratch.set(n, buf);
  }
  const c = n >> 1, s = sign === 1 ? -1 : 1, size = 2 * n;
  for (let g0 = 0; g0 < count; g0 += LINES_PER_BATCH) {
    const k = Math.min(LINES_PER_BATCH, count - g0), o0 = offset + g0 * step;
    // ifftshift on load: line g's buf[j] = x[(j + c) mod n], imaginary parts times s (see centredLine)
    if (stride === 1) {
      // lines along the fast axis: each line's two runs in turn
      for (let g = 0; g < k; g++) {
        const at = o0 + g * step, b = g * size;
        for (let j = 0, q = c; q < n; j++, q++) {
          buf[b + 2 * j] = re[at + q]!;
          buf[b + 2 * j + 1] = s * im[at + q]!;
        }
        for (let j = n - c, q = 0; q < c; j++, q++) {
          buf[b + 2 * j] = re[at + q]!;
          buf[b + 2 * j + 1] = s * im[at + q]!;
        }
      }
    } else {
      // neighbouring lines across the fast axis: one sweep down them reads each row's values together
      let q = c;
      for (let j = 0; j < n; j++) {
        const at = o0 + q * stride;
        for (let g = 0; g < k; g++) {
          buf[g * size + 2 * j] = re[at + g * step]!;
          buf[g * size + 2 * j + 1] = s * im[at + g * step]!;
        }
        q++;
        if (q === n) q = 0;
      }
    }
    const out = plan.forwardBatch(buf, 0, size, 2, k, n);
    // fftshift on store: y[(j + c) mod n] = out[j]
    const ob = plan.batchOffset(0);
    if (stride === 1) {
      for (let g = 0; g < k; g++) {
        const at = o0 + g * step, b = ob + g * size;
        for (let j = 0, p = c; p < n; j++, p++) {
          re[at + p] = out[b + 2 * j]! * scale;
          im[at + p] = s * out[b + 2 * j + 1]! * scale;
        }
        for (let j = n - c, p = 0; p < c; j++, p++) {
          re[at + p] = out[b + 2 * j]! * scale;
          im[at + p] = s * out[b + 2 * j + 1]! * scale;
        }
      }
    } else {
      let p = c;
      for (let j = 0; j < n; j++) {
        const at = o0 + p * stride;
        for (let g = 0; g < k; g++) {
          const o = ob + g * size + 2 * j;
          re[at + g * step] = out[o]! * scale;
          im[at + g * step] = s * out[o + 1]! * scale;
        }
        p++;
        if (p === n) p = 0;
      }
    }
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
      // the lines of the last axis follow one another (step n); along the others, neighbouring lines (step 1)
      if (stride === 1) centredLines(re, im, n, 1, 0, total / n, n, sign, scale);
      else for (let outer = 0; outer < total; outer += block) centredLines(re, im, n, stride, outer, stride, 1, sign, scale);
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
