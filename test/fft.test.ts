import { describe, expect, it } from "vitest";
import { complex, fft as mathFft, ifft as mathIfft, type Complex } from "mathjs";
import { mulberry32 } from "../src/engine/fast.js";
import FFT from "fft.js";
import { FFTPlan, getPlan, fft2c, ifft2c, fft3c, ifft3c, fftc1, ifftc1 } from "../src/recon/fft.js";

/** Deterministic uniform random numbers in [0, 1): the fast operator's seeded generator (mulberry32). */
const rng = mulberry32;

function randomComplex(n: number, seed: number): { re: Float64Array; im: Float64Array } {
  const r = rng(seed);
  const re = new Float64Array(n);
  const im = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    re[i] = 2 * r() - 1;
    im[i] = 2 * r() - 1;
  }
  return { re, im };
}

/** Relative L2 error ‖a − b‖ / ‖b‖ of complex vectors. */
function relErr(aRe: ArrayLike<number>, aIm: ArrayLike<number>, bRe: ArrayLike<number>, bIm: ArrayLike<number>): number {
  let num = 0;
  let den = 0;
  for (let i = 0; i < bRe.length; i++) {
    num += (aRe[i]! - bRe[i]!) ** 2 + (aIm[i]! - bIm[i]!) ** 2;
    den += bRe[i]! ** 2 + bIm[i]! ** 2;
  }
  return Math.sqrt(num / den);
}

const SIZES = [1, 2, 3, 7, 64, 100, 192, 256, 320, 384];

describe("FFTPlan.transform", () => {
  // Reference: mathjs fft (forward, exp(−i…)) and ifft (exp(+i…)/N).
  for (const n of SIZES) {
    it(`sign −1 matches mathjs fft for n = ${n} within 1e-10`, () => {
      const x = randomComplex(n, 1000 + n);
      const ref = mathFft(Array.from(x.re, (v, i) => complex(v, x.im[i]!))) as unknown as Complex[];
      const outRe = new Float64Array(n);
      const outIm = new Float64Array(n);
      new FFTPlan(n).transform(outRe, outIm, x.re, x.im, -1);
      const err = relErr(outRe, outIm, ref.map((z) => z.re), ref.map((z) => z.im));
      expect(err).toBeLessThan(1e-10);
    });

    it(`sign +1 matches n × mathjs ifft for n = ${n} within 1e-10`, () => {
      const x = randomComplex(n, 2000 + n);
      const ref = mathIfft(Array.from(x.re, (v, i) => complex(v, x.im[i]!))) as unknown as Complex[];
      const outRe = new Float64Array(n);
      const outIm = new Float64Array(n);
      new FFTPlan(n).transform(outRe, outIm, x.re, x.im, 1);
      const err = relErr(outRe, outIm, ref.map((z) => z.re * n), ref.map((z) => z.im * n));
      expect(err).toBeLessThan(1e-10);
    });

    it(`forward then inverse / n is the identity for n = ${n} (in place)`, () => {
      const x = randomComplex(n, 3000 + n);
      const re = x.re.slice();
      const im = x.im.slice();
      const plan = getPlan(n);
      plan.transform(re, im, re, im, -1);
      plan.transform(re, im, re, im, 1);
      for (let i = 0; i < n; i++) {
        re[i]! /= n;
        im[i]! /= n;
      }
      expect(relErr(re, im, x.re, x.im)).toBeLessThan(1e-12);
    });
  }

  it("transform of length 1 copies the value", () => {
    const outRe = new Float64Array(1);
    const outIm = new Float64Array(1);
    new FFTPlan(1).transform(outRe, outIm, Float64Array.of(2.5), Float64Array.of(-1), 1);
    expect([outRe[0], outIm[0]]).toEqual([2.5, -1]);
  });

  it("transform gives the same result when a plan is reused", () => {
    const x = randomComplex(192, 7);
    const plan = new FFTPlan(192);
    const a = { re: new Float64Array(192), im: new Float64Array(192) };
    const b = { re: new Float64Array(192), im: new Float64Array(192) };
    plan.transform(a.re, a.im, x.re, x.im, -1);
    plan.transform(b.re, b.im, randomComplex(192, 8).re, randomComplex(192, 8).im, 1);
    plan.transform(b.re, b.im, x.re, x.im, -1);
    expect(Array.from(b.re)).toEqual(Array.from(a.re));
    expect(Array.from(b.im)).toEqual(Array.from(a.im));
  });

  it("constructor throws RangeError for n = 0 and n = 2.5", () => {
    expect(() => new FFTPlan(0)).toThrow(RangeError);
    expect(() => new FFTPlan(2.5)).toThrow(RangeError);
  });

  it("getPlan returns the same plan for the same n", () => {
    expect(getPlan(320)).toBe(getPlan(320));
    expect(getPlan(320).n).toBe(320);
  });
});

/** Slow direct centred reconstruction of [rows][cols] by the defining double sum. */
function directIfft2c(re: Float64Array, im: Float64Array, rows: number, cols: number) {
  const cr = Math.floor(rows / 2);
  const cc = Math.floor(cols / 2);
  const oRe = new Float64Array(rows * cols);
  const oIm = new Float64Array(rows * cols);
  for (let r = 0; r < rows; r++) {
    for (let q = 0; q < cols; q++) {
      let sr = 0;
      let si = 0;
      for (let a = 0; a < rows; a++) {
        for (let b = 0; b < cols; b++) {
          const ph = 2 * Math.PI * (((a - cr) * (r - cr)) / rows + ((b - cc) * (q - cc)) / cols);
          const c = Math.cos(ph);
          const s = Math.sin(ph);
          sr += re[a * cols + b]! * c - im[a * cols + b]! * s;
          si += re[a * cols + b]! * s + im[a * cols + b]! * c;
        }
      }
      oRe[r * cols + q] = sr / (rows * cols);
      oIm[r * cols + q] = si / (rows * cols);
    }
  }
  return { re: oRe, im: oIm };
}

describe("centred transforms", () => {
  for (const [rows, cols, n0, m0] of [
    [8, 6, 2, 5],
    [5, 7, 4, 1],
    [6, 6, 3, 3],
    [1, 5, 0, 0],
  ] as const) {
    it(`ifft2c reconstructs a point of weight w at pixel (${n0}, ${m0}) of ${rows}×${cols} to w there and 0 elsewhere`, () => {
      // Point at x = (n0 − c)·Δx (row, phase) and (m0 − c)·Δx (column, read);
      // s(k) = w·exp(−i2π k·x) sampled at k = (m − c)·Δk with Δk·Δx = 1/N.
      const w = { re: 0.7, im: -0.3 };
      const cr = Math.floor(rows / 2);
      const cc = Math.floor(cols / 2);
      const re = new Float64Array(rows * cols);
      const im = new Float64Array(rows * cols);
      for (let a = 0; a < rows; a++) {
        for (let b = 0; b < cols; b++) {
          const ph = -2 * Math.PI * (((a - cr) * (n0 - cr)) / rows + ((b - cc) * (m0 - cc)) / cols);
          re[a * cols + b] = w.re * Math.cos(ph) - w.im * Math.sin(ph);
          im[a * cols + b] = w.re * Math.sin(ph) + w.im * Math.cos(ph);
        }
      }
      ifft2c(re, im, rows, cols);
      for (let r = 0; r < rows; r++) {
        for (let q = 0; q < cols; q++) {
          const hit = r === n0 && q === m0;
          expect(re[r * cols + q]).toBeCloseTo(hit ? w.re : 0, 12);
          expect(im[r * cols + q]).toBeCloseTo(hit ? w.im : 0, 12);
        }
      }
    });
  }

  for (const [rows, cols] of [
    [8, 6],
    [5, 7],
    [12, 9],
  ] as const) {
    it(`ifft2c matches the direct centred double sum on ${rows}×${cols} within 1e-12`, () => {
      const x = randomComplex(rows * cols, rows * 100 + cols);
      const ref = directIfft2c(x.re, x.im, rows, cols);
      const re = x.re.slice();
      const im = x.im.slice();
      ifft2c(re, im, rows, cols);
      expect(relErr(re, im, ref.re, ref.im)).toBeLessThan(1e-12);
    });
  }

  it("fft2c then ifft2c is the identity on 12×9", () => {
    const x = randomComplex(12 * 9, 11);
    const re = x.re.slice();
    const im = x.im.slice();
    fft2c(re, im, 12, 9);
    ifft2c(re, im, 12, 9);
    expect(relErr(re, im, x.re, x.im)).toBeLessThan(1e-13);
  });

  it("fft2c is the adjoint of N·ifft2c: <F x, y> = <x, N·F⁻¹ y> on 6×5", () => {
    const rows = 6;
    const cols = 5;
    const x = randomComplex(rows * cols, 21);
    const y = randomComplex(rows * cols, 22);
    const fx = { re: x.re.slice(), im: x.im.slice() };
    fft2c(fx.re, fx.im, rows, cols);
    const gy = { re: y.re.slice(), im: y.im.slice() };
    ifft2c(gy.re, gy.im, rows, cols);
    // <a, b> = Σ a·conj(b)
    let lr = 0;
    let li = 0;
    let rr = 0;
    let ri = 0;
    for (let i = 0; i < rows * cols; i++) {
      lr += fx.re[i]! * y.re[i]! + fx.im[i]! * y.im[i]!;
      li += fx.im[i]! * y.re[i]! - fx.re[i]! * y.im[i]!;
      const br = gy.re[i]! * rows * cols;
      const bi = gy.im[i]! * rows * cols;
      rr += x.re[i]! * br + x.im[i]! * bi;
      ri += x.im[i]! * br - x.re[i]! * bi;
    }
    expect(lr).toBeCloseTo(rr, 10);
    expect(li).toBeCloseTo(ri, 10);
  });

  it("fft2c obeys Parseval: Σ|s|² = N·Σ|x|² on 192×100", () => {
    const rows = 192;
    const cols = 100;
    const x = randomComplex(rows * cols, 5);
    let ex = 0;
    for (let i = 0; i < x.re.length; i++) ex += x.re[i]! ** 2 + x.im[i]! ** 2;
    const re = x.re.slice();
    const im = x.im.slice();
    fft2c(re, im, rows, cols);
    let es = 0;
    for (let i = 0; i < re.length; i++) es += re[i]! ** 2 + im[i]! ** 2;
    expect(es / (rows * cols * ex)).toBeCloseTo(1, 12);
  });

  it("fft2c puts the sum of the image at the k-space centre (rows/2, cols/2) for 5×7", () => {
    const x = randomComplex(35, 9);
    let sr = 0;
    let si = 0;
    for (let i = 0; i < 35; i++) {
      sr += x.re[i]!;
      si += x.im[i]!;
    }
    fft2c(x.re, x.im, 5, 7);
    expect(x.re[2 * 7 + 3]).toBeCloseTo(sr, 12);
    expect(x.im[2 * 7 + 3]).toBeCloseTo(si, 12);
  });

  it("ifftc1 with stride and offset transforms one column only and equals ifft2c of a single-column array", () => {
    const rows = 7;
    const cols = 4;
    const x = randomComplex(rows * cols, 31);
    const re = x.re.slice();
    const im = x.im.slice();
    ifftc1(re, im, rows, cols, 2);
    const colRe = new Float64Array(rows);
    const colIm = new Float64Array(rows);
    for (let r = 0; r < rows; r++) {
      colRe[r] = x.re[r * cols + 2]!;
      colIm[r] = x.im[r * cols + 2]!;
    }
    ifft2c(colRe, colIm, rows, 1);
    for (let r = 0; r < rows; r++) {
      expect(re[r * cols + 2]!).toBeCloseTo(colRe[r]!, 13);
      expect(im[r * cols + 2]!).toBeCloseTo(colIm[r]!, 13);
      for (const q of [0, 1, 3]) expect(re[r * cols + q]).toBe(x.re[r * cols + q]);
    }
    fftc1(re, im, rows, cols, 2);
    expect(relErr(re, im, x.re, x.im)).toBeLessThan(1e-14);
  });

  it("ifftc1 throws RangeError when the strided line runs past the array", () => {
    expect(() => ifftc1(new Float64Array(10), new Float64Array(10), 4, 3, 1)).toThrow(RangeError);
  });

  it("ifft2c throws RangeError when rows·cols differs from the array length", () => {
    expect(() => ifft2c(new Float64Array(12), new Float64Array(12), 3, 5)).toThrow(RangeError);
  });

  it("ifft3c reconstructs a point at (z, y, x) = (1, 3, 2) of 3×4×5 to its weight", () => {
    const [nz, ny, nx] = [3, 4, 5];
    const [z0, y0, x0] = [1, 3, 2];
    const re = new Float64Array(nz * ny * nx);
    const im = new Float64Array(nz * ny * nx);
    const w = 1.75;
    for (let a = 0; a < nz; a++) {
      for (let b = 0; b < ny; b++) {
        for (let c = 0; c < nx; c++) {
          const ph =
            -2 *
            Math.PI *
            (((a - 1) * (z0 - 1)) / nz + ((b - 2) * (y0 - 2)) / ny + ((c - 2) * (x0 - 2)) / nx);
          re[(a * ny + b) * nx + c] = w * Math.cos(ph);
          im[(a * ny + b) * nx + c] = w * Math.sin(ph);
        }
      }
    }
    ifft3c(re, im, nz, ny, nx);
    for (let i = 0; i < re.length; i++) {
      const hit = i === (z0 * ny + y0) * nx + x0;
      expect(re[i]).toBeCloseTo(hit ? w : 0, 12);
      expect(im[i]).toBeCloseTo(0, 12);
    }
    fft3c(re, im, nz, ny, nx);
    ifft3c(re, im, nz, ny, nx);
    expect(re[(z0 * ny + y0) * nx + x0]).toBeCloseTo(w, 12);
  });
});

describe("FFTPlan's own radix-4 kernel against fft.js, bit for bit", () => {
  // the plan's power-of-two transforms use their own copy of fft.js's radix-4 schedule (strided input,
  // zero tails skipped): every output must be the very number fft.js gives (Object.is: signed zeros too)
  const same = (a: ArrayLike<number>, b: ArrayLike<number>) => {
    for (let k = 0; k < b.length; k++) if (!Object.is(a[k], b[k])) return `differs at ${k}: ${a[k]} vs ${b[k]}`;
    return "same";
  };
  for (const n of [2, 4, 8, 16, 32, 64, 128, 256, 512, 1024]) {
    it(`n = ${n}: execute(±1) and strided input, full and with a zero tail`, () => {
      const r = rng(7000 + n);
      for (const nz of [n, Math.max(1, n >> 2), Math.max(1, (n >> 2) - 3)]) {
        const x = new Float64Array(2 * n);
        for (let j = 0; j < nz; j++) {
          x[2 * j] = 2 * r() - 1;
          x[2 * j + 1] = j % 5 === 0 ? 0 : 2 * r() - 1;
        }
        const ref = new Float64Array(2 * n);
        new FFT(n).transform(ref, x);
        const p = new FFTPlan(n);
        p.input.set(x);
        p.execute(-1);
        expect(same(p.output, ref)).toBe("same");
        // + sign: fft.js on the conjugate, conjugated
        const xc = Float64Array.from(x, (v, k) => (k % 2 ? -v : v)), refc = new Float64Array(2 * n);
        new FFT(n).transform(refc, xc);
        for (let k = 1; k < 2 * n; k += 2) refc[k] = -refc[k]!;
        p.input.set(x);
        p.execute(1);
        expect(same(p.output, refc)).toBe("same");
        // element j at src[3 + 6j], told that j ≥ nz are zero
        const src = new Float64Array(3 + 6 * n);
        for (let j = 0; j < n; j++) {
          src[3 + 6 * j] = x[2 * j]!;
          src[3 + 6 * j + 1] = x[2 * j + 1]!;
        }
        p.forwardStrided(src, 3, 6, nz);
        expect(same(p.output, ref)).toBe("same");
      }
    });
  }
});
