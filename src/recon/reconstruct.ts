/**
 * Cartesian reconstruction: the acquired k-space is put on the full grid
 * (reversed rows turned round, asymmetric-echo and partial-Fourier gaps left
 * zero), transformed by the centred inverse FFT (convention in fft.ts) — along
 * slice-encoding steps too for 3D — with homodyne detection for partial Fourier if
 * chosen, and the read and phase oversampling removed by keeping the central
 * matrix. Images are [slice-encoding steps][phase][read].
 */
import type { KGrid } from "../sequence/types.js";
import { ifft2c, ifftc1 } from "./fft.js";
import { homodynePlane } from "./partial-fourier.js";

export interface ComplexVolume {
  slice: number;
  phase: number;
  read: number;
  re: Float64Array;
  im: Float64Array;
}

/**
 * Acquired k-space [slice-encoding step·phase rows][samples] → full grid [slice-encoding steps][phase][grid.read].
 * Sample j of a forward row goes to column offset + j, of a reversed row to offset + samples − 1 − j.
 */
export function toGrid(k: ComplexVolume, grid: KGrid): ComplexVolume {
  const rows = k.slice * k.phase, n = k.read, full = grid.read;
  const re = new Float64Array(rows * full), im = new Float64Array(rows * full);
  for (let r = 0; r < rows; r++) {
    const src = r * n, dst = r * full + grid.offset;
    if (grid.reversed && grid.reversed[r]) {
      for (let j = 0; j < n; j++) {
        re[dst + n - 1 - j] = k.re[src + j]!;
        im[dst + n - 1 - j] = k.im[src + j]!;
      }
    } else {
      re.set(k.re.subarray(src, src + n), dst);
      im.set(k.im.subarray(src, src + n), dst);
    }
  }
  return { slice: k.slice, phase: k.phase, read: full, re, im };
}

/** Keeps the central image.phase × image.read of every slice-encoding step (oversampling removal). */
function crop(v: ComplexVolume, image: { phase: number; read: number }): ComplexVolume {
  const { slice: sliceSteps, phase: np, read: nr } = v;
  const plane = np * nr;
  // full index n_acq ↔ position (n_acq − ⌊N_acq/2⌋)·Δ; kept index n ↔ (n − ⌊N/2⌋)·Δ
  const offR = Math.floor(nr / 2) - Math.floor(image.read / 2);
  const offP = Math.floor(np / 2) - Math.floor(image.phase / 2);
  const out = {
    slice: sliceSteps, phase: image.phase, read: image.read,
    re: new Float64Array(sliceSteps * image.phase * image.read),
    im: new Float64Array(sliceSteps * image.phase * image.read),
  };
  for (let p = 0; p < sliceSteps; p++) {
    for (let y = 0; y < image.phase; y++) {
      const src = p * plane + (y + offP) * nr + offR;
      const dst = (p * image.phase + y) * image.read;
      out.re.set(v.re.subarray(src, src + image.read), dst);
      out.im.set(v.im.subarray(src, src + image.read), dst);
    }
  }
  return out;
}

/** Full-grid k-space → image: centred inverse FFT per plane (no slice-encoding step transform), oversampling removed. */
export function reconstructCartesian(k: ComplexVolume, image: { slice: number; phase: number; read: number }): ComplexVolume {
  const { slice: sliceSteps, phase: np, read: nr } = k;
  const re = Float64Array.from(k.re), im = Float64Array.from(k.im);
  const plane = np * nr;
  for (let p = 0; p < sliceSteps; p++) {
    ifft2c(re.subarray(p * plane, (p + 1) * plane), im.subarray(p * plane, (p + 1) * plane), np, nr);
  }
  return crop({ slice: sliceSteps, phase: np, read: nr, re, im }, image);
}

/**
 * Full-grid k-space (from toGrid) → image, following the sequence's grid:
 * slice-encoding step FFT for 3D, homodyne or zero-filled partial Fourier, crop.
 */
export function reconstructGrid(k: ComplexVolume, grid: KGrid, image: { phase: number; read: number }): ComplexVolume {
  const { slice: sliceSteps, phase: np, read: nr } = k;
  const re = Float64Array.from(k.re), im = Float64Array.from(k.im);
  const plane = np * nr;
  if (grid.threeD && sliceSteps > 1) {
    for (let i = 0; i < plane; i++) ifftc1(re, im, sliceSteps, plane, i);
  }
  const homodyne = grid.partialFourier.method === "homodyne" && (grid.phaseFirst > 0 || grid.offset > 0);
  for (let p = 0; p < sliceSteps; p++) {
    const r = re.subarray(p * plane, (p + 1) * plane), q = im.subarray(p * plane, (p + 1) * plane);
    if (homodyne) homodynePlane(r, q, np, nr, grid.phaseFirst, grid.offset);
    else ifft2c(r, q, np, nr);
  }
  return crop({ slice: sliceSteps, phase: np, read: nr, re, im }, image);
}

export function magnitude(v: { re: Float64Array; im: Float64Array }): Float64Array {
  return hypotOf(v.re, v.im);
}

/** Math.hypot of each (re, im) pair; typed arrays only, so the loop's compiled code serves every run. */
function hypotOf(re: Float64Array, im: Float64Array): Float64Array {
  const out = new Float64Array(re.length);
  for (let i = 0; i < out.length; i++) out[i] = Math.hypot(re[i]!, im[i]!);
  return out;
}
