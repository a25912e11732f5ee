/**
 * Cartesian reconstruction: centred inverse FFT of the acquired k-space
 * (convention in fft.ts), then removal of read and phase oversampling by
 * keeping the central matrix. Returns the complex image [partitions][phase][read].
 */
import { ifft2c } from "./fft.js";

export interface ComplexVolume {
  partitions: number;
  phase: number;
  read: number;
  re: Float64Array;
  im: Float64Array;
}

export function reconstructCartesian(
  k: ComplexVolume,
  image: { partitions: number; phase: number; read: number },
): ComplexVolume {
  const { partitions, phase: np, read: nr } = k;
  const re = Float64Array.from(k.re), im = Float64Array.from(k.im);
  const plane = np * nr;
  for (let p = 0; p < partitions; p++) {
    ifft2c(re.subarray(p * plane, (p + 1) * plane), im.subarray(p * plane, (p + 1) * plane), np, nr);
  }
  // acquired index n_acq ↔ position (n_acq − ⌊N_acq/2⌋)·Δ; kept index n ↔ (n − ⌊N/2⌋)·Δ
  const offR = Math.floor(nr / 2) - Math.floor(image.read / 2);
  const offP = Math.floor(np / 2) - Math.floor(image.phase / 2);
  const out = {
    partitions, phase: image.phase, read: image.read,
    re: new Float64Array(partitions * image.phase * image.read),
    im: new Float64Array(partitions * image.phase * image.read),
  };
  for (let p = 0; p < partitions; p++) {
    for (let y = 0; y < image.phase; y++) {
      const src = p * plane + (y + offP) * nr + offR;
      const dst = (p * image.phase + y) * image.read;
      out.re.set(re.subarray(src, src + image.read), dst);
      out.im.set(im.subarray(src, src + image.read), dst);
    }
  }
  return out;
}

export function magnitude(v: { re: Float64Array; im: Float64Array }): Float64Array {
  const out = new Float64Array(v.re.length);
  for (let i = 0; i < out.length; i++) out[i] = Math.hypot(v.re[i]!, v.im[i]!);
  return out;
}
