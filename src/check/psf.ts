/**
 * Point-spread functions of weighted k-space sampling windows, and their
 * full width at half maximum in pixels.
 *
 * A window w(u) over the normalized k-coordinate u ∈ [−½, ½] (u = k/(N·Δk),
 * so k·r = u·x with x in pixels) images a point as h(x) = ∫ w(u)·e^{i2πux} du
 * (Fourier imaging with a weighted window: Haacke et al. 1999, ch. 13;
 * Bernstein, King & Zhou 2004, §13.2). For w piecewise exponential,
 * w(u) = e^{a·u + b} on [u0, u1], each piece integrates in closed form:
 *   ∫ e^{(a + i2πx)u + b} du = e^b·(e^{z·u1} − e^{z·u0})/z,  z = a + i2πx.
 * Uniform weighting gives the sinc, FWHM 1.2067 px; a decay e^{−t/T2*} over a
 * readout of T_acq gives a = −T_acq/T2*, and for T2* ≪ T_acq |h| is the
 * magnitude of a one-sided (complex) Lorentzian, 1/|β + i2πx| with
 * β = T_acq/T2*, of FWHM √3·T_acq/(π·T2*) px.
 * A sampled window (one weight per line, e.g. an echo train) is the discrete
 * sum h(y) = Σ_n w_n·e^{i2π(n − c)y/L}.
 */

/** One exponential piece of a window: w(u) = exp(a·u + b) on [u0, u1]. */
export interface ExpPiece {
  u0: number;
  u1: number;
  a: number;
  b: number;
}

/** |h(x)| of a piecewise-exponential window at x pixels (closed form). */
export function psfExpWindow(pieces: ExpPiece[], x: number): number {
  let re = 0, im = 0;
  for (const p of pieces) {
    const zr = p.a, zi = 2 * Math.PI * x;
    const e1 = Math.exp(zr * p.u1 + p.b), e0 = Math.exp(zr * p.u0 + p.b);
    // numerator e^{z·u1} − e^{z·u0} (times e^b)
    const nr = e1 * Math.cos(zi * p.u1) - e0 * Math.cos(zi * p.u0);
    const ni = e1 * Math.sin(zi * p.u1) - e0 * Math.sin(zi * p.u0);
    const d = zr * zr + zi * zi;
    if (d < 1e-300) {
      re += Math.exp(p.b) * (p.u1 - p.u0);
      continue;
    }
    // (nr + i·ni)/(zr + i·zi)
    re += (nr * zr + ni * zi) / d;
    im += (ni * zr - nr * zi) / d;
  }
  return Math.hypot(re, im);
}

/** |h(y)| of a sampled window: weights[n] on lines n = 0…L−1 with k = 0 at line c, y in pixels. */
export function psfSampled(weights: ArrayLike<number>, c: number, y: number): number {
  const L = weights.length;
  let re = 0, im = 0;
  for (let n = 0; n < L; n++) {
    const w = weights[n]!;
    if (w === 0) continue;
    const th = (2 * Math.PI * (n - c) * y) / L;
    re += w * Math.cos(th);
    im += w * Math.sin(th);
  }
  return Math.hypot(re, im);
}

/**
 * FWHM (px) of a PSF magnitude f(y) that peaks at y = 0 and is even in y
 * (true for real, non-negative windows: h(−y) = conj h(y)): twice the first
 * y > 0 where f falls to half of f(0), by a scan in steps of 0.01 px and
 * bisection. Infinity when it stays above half out to `maxPx`.
 */
export function fwhm(f: (y: number) => number, maxPx = 256): number {
  const half = f(0) / 2;
  let lo = 0, hi = -1;
  for (let y = 0.01; y <= maxPx; y += 0.01) {
    if (f(y) < half) { hi = y; break; }
    lo = y;
  }
  if (hi < 0) return Infinity;
  for (let i = 0; i < 40; i++) {
    const mid = (lo + hi) / 2;
    if (f(mid) < half) hi = mid; else lo = mid;
  }
  return lo + hi;
}

/** FWHM (px) of the readout PSF for a gradient echo: e^{−t/T2*} over a window of duration tAcq centred on the echo. */
export function fwhmGradientEcho(tAcq: number, t2star: number): number {
  const a = -tAcq / t2star;
  return fwhm((x) => psfExpWindow([{ u0: -0.5, u1: 0.5, a, b: 0 }], x));
}

/**
 * FWHM (px) of the readout PSF for a spin echo: e^{−|t − TE|/T2′}·e^{−(t − TE)/T2} over a window
 * of duration tAcq centred on the echo (T2′ refocused at the echo; Hahn 1950).
 */
export function fwhmSpinEcho(tAcq: number, t2: number, t2prime: number): number {
  const r2 = tAcq / t2, rp = Number.isFinite(t2prime) ? tAcq / t2prime : 0;
  return fwhm((x) => psfExpWindow([
    { u0: -0.5, u1: 0, a: rp - r2, b: 0 },
    { u0: 0, u1: 0.5, a: -rp - r2, b: 0 },
  ], x));
}

/** FWHM (px) of a sampled window (one weight per line, k = 0 at line c). */
export function fwhmSampled(weights: ArrayLike<number>, c: number): number {
  return fwhm((y) => psfSampled(weights, c, y), weights.length);
}

/** The sinc's FWHM (px) for uniform full sampling: 2·0.60335 (root of sin(πx)/(πx) = ½). */
export const SINC_FWHM = 1.2067;
