import { describe, expect, it } from "vitest";
import { addNoise, cholesky, neighbourCovariance, snrSigma, type CMatrix } from "../src/dataset/noise.js";
import { Rng } from "../src/dataset/prng.js";
import { ifft2c } from "../src/recon/fft.js";
import { UserError } from "../src/errors.js";
import type { CoilArray } from "../src/dataset/coils.js";

const ring4: CoilArray = { elements: 4, rows: 1, loopRadius: 0.05, arrayRadius: 0.15, rowSpacing: 0.1, zCentre: 0 };

/** A Hermitian positive-definite Ψ with complex off-diagonal entries. */
function complexPsi(): CMatrix {
  const n = 3;
  const re = Float64Array.from([2, 0.5, 0.1, 0.5, 1, -0.2, 0.1, -0.2, 1.5]);
  const im = Float64Array.from([0, 0.3, -0.1, -0.3, 0, 0.25, 0.1, -0.25, 0]);
  return { n, re, im };
}

function sampleCovariance(re: Float64Array, im: Float64Array, C: number, m: number): { re: number[]; im: number[]; pre: number[] } {
  const out = { re: new Array(C * C).fill(0), im: new Array(C * C).fill(0), pre: new Array(C * C).fill(0) };
  for (let s = 0; s < m; s++) {
    for (let i = 0; i < C; i++) {
      for (let j = 0; j < C; j++) {
        const ar = re[i * m + s]!, ai = im[i * m + s]!, br = re[j * m + s]!, bi = im[j * m + s]!;
        out.re[i * C + j] += (ar * br + ai * bi) / m; // n_i·conj(n_j)
        out.im[i * C + j] += (ai * br - ar * bi) / m;
        out.pre[i * C + j] += (ar * br - ai * bi) / m; // Re(n_i·n_j), pseudo-covariance
      }
    }
  }
  return out;
}

describe("coil noise", () => {
  it("cholesky returns L with L·Lᴴ = Ψ within 1e-14", () => {
    const psi = complexPsi(), n = psi.n;
    const L = cholesky(psi, "--noise-covariance");
    for (let i = 0; i < n; i++) for (let j = 0; j < n; j++) {
      let r = 0, m = 0;
      for (let k = 0; k < n; k++) {
        const ar = L.re[i * n + k]!, ai = L.im[i * n + k]!, br = L.re[j * n + k]!, bi = -L.im[j * n + k]!;
        r += ar * br - ai * bi;
        m += ar * bi + ai * br;
      }
      expect(Math.abs(r - psi.re[i * n + j]!)).toBeLessThan(1e-14);
      expect(Math.abs(m - psi.im[i * n + j]!)).toBeLessThan(1e-14);
    }
  });

  it("cholesky rejects a neighbour correlation of 0.6 on a ring of 8 (eigenvalue 1 + 2·0.6·cos π < 0) naming the option", () => {
    // eigenvalues of a circulant matrix 1 + 2ρ·cos(2πk/n) (closed form for circulant matrices)
    const psi = neighbourCovariance({ ...ring4, elements: 8 }, 0.6);
    expect(() => cholesky(psi, "--noise-correlation")).toThrow(UserError);
    expect(() => cholesky(psi, "--noise-correlation")).toThrow(/--noise-correlation: .*not positive definite/);
    expect(() => cholesky(neighbourCovariance({ ...ring4, elements: 8 }, 0.45), "--noise-correlation")).not.toThrow();
  });

  it("addNoise sample covariance matches σ²Ψ within 5 standard errors and is circular (fixed seed, 40000 samples)", () => {
    // For complex Gaussian samples the sample covariance entry (i, j) has variance Ψii·Ψjj/m
    // (complex Wishart moments, N. R. Goodman, Ann. Math. Stat. 34 (1963) 152–177)
    for (const psi of [complexPsi(), neighbourCovariance(ring4, 0.3)]) {
      const C = psi.n, m = 40000, sigma = 0.7;
      const re = new Float64Array(C * m), im = new Float64Array(C * m);
      addNoise(re, im, C, m, sigma, cholesky(psi, "x"), Rng.stream(7, 0, 3));
      const S = sampleCovariance(re, im, C, m);
      for (let i = 0; i < C; i++) for (let j = 0; j < C; j++) {
        const se = (sigma * sigma * Math.sqrt(psi.re[i * C + i]! * psi.re[j * C + j]!)) / Math.sqrt(m);
        expect(Math.abs(S.re[i * C + j]! - sigma * sigma * psi.re[i * C + j]!)).toBeLessThan(5 * se);
        expect(Math.abs(S.im[i * C + j]! - sigma * sigma * psi.im[i * C + j]!)).toBeLessThan(5 * se);
        expect(Math.abs(S.pre[i * C + j]!)).toBeLessThan(5 * se); // circular symmetry: E[n·nᵀ] = 0
      }
    }
  });

  it("snrSigma: the reconstructed noise-only image has pixel std σ/√N, so A/std equals the requested SNR within 3%", () => {
    // Parseval for the centred DFT with 1/N on the inverse (recon/fft.ts convention)
    const N = 32, n = N * N;
    const tr = new Float64Array(n), ti = new Float64Array(n);
    for (let y = 8; y < 24; y++) for (let x = 8; x < 24; x++) tr[y * N + x] = 2 + (x % 3) * 0.1;
    const { sigma, meanSignal } = snrSigma(tr, ti, 25);
    const re = new Float64Array(n), im = new Float64Array(n);
    let acc = 0;
    const trials = 20;
    for (let t = 0; t < trials; t++) {
      re.fill(0); im.fill(0);
      addNoise(re, im, 1, n, sigma, cholesky({ n: 1, re: Float64Array.of(1), im: Float64Array.of(0) }, "x"), Rng.stream(3, t, 3));
      ifft2c(re, im, N, N);
      for (let i = 0; i < n; i++) acc += re[i]! ** 2 + im[i]! ** 2;
    }
    const std = Math.sqrt(acc / (trials * n));
    let want = 0;
    for (let x = 8; x < 24; x++) want += (2 + (x % 3) * 0.1) / 16; // every object pixel is ≥ 0.1·max
    expect(meanSignal).toBeCloseTo(want, 12);
    expect(Math.abs(meanSignal / std / 25 - 1)).toBeLessThan(0.03);
  });

  it("Rng streams: the same seed repeats, another seed or purpose differs; uniform mean and normal variance as expected", () => {
    const a = Rng.stream(5, 2, 3), b = Rng.stream(5, 2, 3), c = Rng.stream(6, 2, 3), d = Rng.stream(5, 2, 2);
    const xa = Array.from({ length: 8 }, () => a.nextU32());
    expect(Array.from({ length: 8 }, () => b.nextU32())).toEqual(xa);
    expect(Array.from({ length: 8 }, () => c.nextU32())).not.toEqual(xa);
    expect(Array.from({ length: 8 }, () => d.nextU32())).not.toEqual(xa);
    const r = Rng.stream(1, 0, 1), m = 100000;
    let su = 0, sn = 0, sn2 = 0;
    for (let i = 0; i < m; i++) {
      su += r.uniform();
      const z = r.normal();
      sn += z;
      sn2 += z * z;
    }
    // uniform: mean 1/2, sd of the mean sqrt(1/12/m); normal: mean 0, variance 1 (sd of the variance estimate sqrt(2/m))
    expect(Math.abs(su / m - 0.5)).toBeLessThan(5 * Math.sqrt(1 / 12 / m));
    expect(Math.abs(sn / m)).toBeLessThan(5 / Math.sqrt(m));
    expect(Math.abs(sn2 / m - 1)).toBeLessThan(5 * Math.sqrt(2 / m));
  });
});
