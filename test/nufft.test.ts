/**
 * The type-1 non-uniform FFT (src/engine/nufft.ts, exponential-of-semicircle
 * kernel: Barnett, Magland & af Klinteberg 2019, SIAM J. Sci. Comput.
 * 41:C479) against the direct sum f_j = Σ_p c_p·exp(−i2π·j·x_p), and its use
 * by the time-segmented fold for an oblique readout (engine-fast-general's
 * case checks the fold's k-space against the direct operator).
 */
import { describe, expect, test } from "vitest";
import { esWidth, Nufft1 } from "../src/engine/nufft.js";

function lcg(seed: number): () => number {
  let s = seed;
  return () => (s = (s * 16807) % 2147483647) / 2147483647;
}

/** Relative L2 error of the NUFFT against the direct sum for m random points (x over several periods) and strengths. */
function error(n: number, eps: number, m: number, seed: number): number {
  const rnd = lcg(seed), x = new Float64Array(m), cr = new Float64Array(m), ci = new Float64Array(m);
  for (let p = 0; p < m; p++) {
    x[p] = (rnd() - 0.5) * 7;
    cr[p] = rnd() - 0.5;
    ci[p] = rnd() - 0.5;
  }
  const plan = new Nufft1(n, esWidth(eps));
  plan.setPoints(x, m);
  const or = new Float64Array(n), oi = new Float64Array(n);
  plan.transform(cr, ci, or, oi);
  let num = 0, den = 0;
  for (let j = 0; j < n; j++) {
    let sr = 0, si = 0;
    for (let p = 0; p < m; p++) {
      const a = -2 * Math.PI * ((j * x[p]!) % 1);
      sr += cr[p]! * Math.cos(a) - ci[p]! * Math.sin(a);
      si += cr[p]! * Math.sin(a) + ci[p]! * Math.cos(a);
    }
    num += (sr - or[j]!) ** 2 + (si - oi[j]!) ** 2;
    den += sr * sr + si * si;
  }
  return Math.sqrt(num / den);
}

describe("non-uniform FFT (type 1, ES kernel)", () => {
  test("within 3ε of the direct sum for ε = 1e-3 … 1e-12, odd and even lengths; a narrower kernel is measurably worse", () => {
    for (const n of [7, 64, 255]) {
      for (const eps of [1e-3, 1e-6, 1e-9, 1e-12]) expect(error(n, eps, 300, n + 1)).toBeLessThan(3 * eps);
    }
    // the width rule matters: the kernel of ε = 1e-3 is far from 1e-9 (the comparison can fail)
    expect(error(64, 1e-3, 300, 5)).toBeGreaterThan(1e-5);
  });
  test("width rule: ⌈log10(1/ε)⌉ + 1 grid points, within 2 … 16", () => {
    expect(esWidth(1e-6)).toBe(7);
    expect(esWidth(1.25e-7)).toBe(8);
    expect(esWidth(1)).toBe(2);
    expect(esWidth(1e-30)).toBe(16);
  });
});
