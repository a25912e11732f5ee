/**
 * Independent readers for the tests: .npy files through npyjs (a third-party
 * reader, not isofold's own encoder) and the centred inverse DFT with 1/n
 * written out as a direct sum (no FFT), the convention case.json states.
 */
import { readFileSync } from "node:fs";
import npyjs from "npyjs";

/** A .npy file read by npyjs: dtype, shape and the flat data. */
export function npy(file: string): { dtype: string; shape: number[]; data: ArrayLike<number> } {
  const b = readFileSync(file);
  const p = new npyjs().parse(b.buffer.slice(b.byteOffset, b.byteOffset + b.byteLength));
  return { dtype: p.dtype, shape: p.shape, data: p.data as unknown as ArrayLike<number> };
}

/** Centred inverse DFT with 1/n of one line (direct sum). */
export function idft(re: ArrayLike<number>, im: ArrayLike<number>): { re: Float64Array; im: Float64Array } {
  const n = re.length, c = Math.floor(n / 2);
  const or = new Float64Array(n), oi = new Float64Array(n);
  for (let x = 0; x < n; x++) {
    let sr = 0, si = 0;
    for (let m = 0; m < n; m++) {
      const th = (2 * Math.PI * (m - c) * (x - c)) / n;
      sr += re[m]! * Math.cos(th) - im[m]! * Math.sin(th);
      si += re[m]! * Math.sin(th) + im[m]! * Math.cos(th);
    }
    or[x] = sr / n;
    oi[x] = si / n;
  }
  return { re: or, im: oi };
}
