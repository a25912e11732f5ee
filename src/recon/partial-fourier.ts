/**
 * Partial-Fourier reconstruction of one k-space plane [phase][read] whose
 * lines below `firstPhase` and columns below `firstRead` were not acquired
 * (zeros). Zero-filling is the plain centred inverse FFT. Homodyne detection
 * (Noll, Nishimura & Macovski 1991, IEEE TMI 10:154–163):
 *   1. weight the acquired k-space with H(k): 0 where not acquired, 2 beyond
 *      the mirror of the missing part, a linear ramp 1/(h+1) … 2 − 1/(h+1)
 *      across the symmetric band of half-width h about k = 0, so that
 *      H(k) + H(−k) = 2 wherever either side was acquired;
 *   2. estimate the image phase φ from the symmetric band alone (Hann window);
 *   3. image = Re{ IFFT(H·s)·e^(−iφ) }·e^(iφ).
 * For a real object with slowly varying phase this restores the resolution
 * of the full k-space; the weights are applied per axis (product) when both
 * axes are partial.
 */
import { ifft2c } from "./fft.js";

/** Homodyne weight and low-pass window along one axis; both all-ones when first = 0. */
export function homodyneWeights(n: number, first: number): { weight: Float64Array; window: Float64Array } {
  const weight = new Float64Array(n).fill(1), window = new Float64Array(n).fill(1);
  if (first <= 0) return { weight, window };
  const c = Math.floor(n / 2), h = c - first, top = 2 * c - first;
  for (let i = 0; i < n; i++) {
    if (i < first) {
      weight[i] = 0;
      window[i] = 0;
    } else if (i <= top) {
      weight[i] = 1 + (i - c) / (h + 1);
      window[i] = 0.5 * (1 + Math.cos((Math.PI * (i - c)) / (h + 1)));
    } else {
      weight[i] = 2;
      window[i] = 0;
    }
  }
  return { weight, window };
}

/** Homodyne reconstruction in place: k-space plane in, complex image plane out (same size). */
export function homodynePlane(re: Float64Array, im: Float64Array, nPhase: number, nRead: number, firstPhase: number, firstRead: number): void {
  const wp = homodyneWeights(nPhase, firstPhase), wr = homodyneWeights(nRead, firstRead);
  const n = nPhase * nRead;
  const lr = new Float64Array(n), li = new Float64Array(n);
  for (let y = 0; y < nPhase; y++) {
    for (let x = 0; x < nRead; x++) {
      const i = y * nRead + x;
      const lw = wp.window[y]! * wr.window[x]!;
      lr[i] = re[i]! * lw;
      li[i] = im[i]! * lw;
      const w = wp.weight[y]! * wr.weight[x]!;
      re[i] = re[i]! * w;
      im[i] = im[i]! * w;
    }
  }
  ifft2c(re, im, nPhase, nRead);
  ifft2c(lr, li, nPhase, nRead);
  for (let i = 0; i < n; i++) {
    const m = Math.hypot(lr[i]!, li[i]!);
    const c = m > 0 ? lr[i]! / m : 1, s = m > 0 ? li[i]! / m : 0;
    const real = re[i]! * c + im[i]! * s; // Re{A·e^(−iφ)}
    re[i] = real * c;
    im[i] = real * s;
  }
}
