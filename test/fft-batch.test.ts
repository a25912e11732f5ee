/**
 * FFTPlan.forwardBatch (recon/fft.ts) against forwardStrided of each input,
 * bit for bit: the batched first step and the WebAssembly SIMD later steps
 * (recon/fft-wasm.ts) must give fft.js's numbers exactly (the phase step of
 * the fast readout operator relies on it: engine/fast-phase.ts). And both
 * against a direct O(n²) DFT (the definition) to rounding.
 */
import { afterEach, describe, expect, it } from "vitest";
import { centredLine, centredLines, FFTPlan, fftWasmActive, setFftWasm } from "../src/recon/fft.js";
import { mulberry32 } from "../src/engine/fast.js";
import { readAxis, readPartStart, readStep } from "../src/engine/fast-phase.js";

/** Deterministic values in [−0.5, 0.5): the fast operator's seeded generator (mulberry32). */
function rng(seed: number): () => number {
  const u = mulberry32(seed);
  return () => u() - 0.5;
}

/** `count` inputs side by side (input g at offset so + 2g), rows ss apart; elements j ≥ nz exactly +0. */
function inputs(n: number, count: number, nz: number, seed: number): { src: Float64Array; so: number; ss: number } {
  const r = rng(seed), so = 3, ss = 2 * count + 4;
  const src = new Float64Array(so + ss * n + 8);
  for (let j = 0; j < nz; j++) {
    for (let g = 0; g < count; g++) {
      src[so + 2 * g + j * ss] = r();
      src[so + 2 * g + j * ss + 1] = r();
    }
  }
  return { src, so, ss };
}

/** Throws unless each of the `count` outputs of `plan`'s last batch equals forwardStrided of its input in src, bit for bit; returns count. */
function sameAsStrided(plan: FFTPlan, out: Float64Array, src: Float64Array, so: number, ss: number, count: number, nz: number): number {
  const n = plan.n, single = new FFTPlan(n);
  for (let g = 0; g < count; g++) {
    single.forwardStrided(src, so + 2 * g, ss, nz);
    const o = plan.batchOffset(g);
    for (let j = 0; j < 2 * n; j++) {
      if (!Object.is(out[o + j], single.output[j])) throw new Error(`n ${n}, count ${count}, nz ${nz}, input ${g}, value ${j}: ${out[o + j]} ≠ ${single.output[j]}`);
    }
  }
  return count;
}

const SIZES = [1, 2, 3, 4, 5, 8, 12, 16, 32, 64, 96, 128, 256, 512, 2048];

afterEach(() => {
  setFftWasm(true);
});

describe("forwardBatch", () => {
  it("runs the WebAssembly SIMD steps here (else the twin would be compared with itself)", () => {
    expect(fftWasmActive()).toBe(true);
  });

  for (const wasm of [true, false]) {
    it(`gives forwardStrided's bits for every input (${wasm ? "WebAssembly SIMD steps" : "TypeScript twin"})`, () => {
      setFftWasm(wasm);
      let checked = 0;
      for (const n of SIZES) {
        for (const count of [1, 3, 8]) {
          for (const nz of new Set([n, Math.max(1, n >> 1), Math.max(1, n >> 2), Math.max(1, Math.floor(n / 5)), 1])) {
            const { src, so, ss } = inputs(n, count, nz, 7 * n + 31 * count + nz);
            const batch = new FFTPlan(n);
            checked += sameAsStrided(batch, batch.forwardBatch(src, so, 2, ss, count, nz), src, so, ss, count, nz);
          }
        }
      }
      expect(checked).toBeGreaterThan(150);
    });
  }

  it("gives forwardStrided's bits with its inputs in the plan's input area (the first step on the SIMD kernel too)", () => {
    let checked = 0;
    for (const n of SIZES.filter((m) => m >= 2 && (m & (m - 1)) === 0)) {
      const plan = new FFTPlan(n);
      for (const count of [1, 3, 8]) {
        for (const nz of new Set([n, Math.max(1, n >> 1), Math.max(1, n >> 2), Math.max(1, Math.floor(n / 5)), 1])) {
          const { src, so, ss } = inputs(n, count, nz, 11 * n + 5 * count + nz);
          // the same numbers copied into the area, at an odd offset (not 16-byte aligned)
          const area = plan.inputArea(src.length + 1);
          expect(area).not.toBeNull();
          area!.set(src, 1);
          checked += sameAsStrided(plan, plan.forwardBatch(area!, so + 1, 2, ss, count, nz), src, so, ss, count, nz);
        }
      }
    }
    expect(checked).toBeGreaterThan(100);
  });

  it("agrees with the direct DFT X[k] = Σ_j x[j]·exp(−i2πkj/n) to rounding", () => {
    for (const n of [4, 12, 64, 256]) {
      const count = 5, { src, so, ss } = inputs(n, count, n, n);
      const plan = new FFTPlan(n), out = plan.forwardBatch(src, so, 2, ss, count, n);
      for (let g = 0; g < count; g++) {
        let err = 0, ref = 0;
        for (let k = 0; k < n; k++) {
          let re = 0, im = 0;
          for (let j = 0; j < n; j++) {
            const xr = src[so + 2 * g + j * ss]!, xi = src[so + 2 * g + j * ss + 1]!, th = (-2 * Math.PI * k * j) / n;
            re += xr * Math.cos(th) - xi * Math.sin(th);
            im += xr * Math.sin(th) + xi * Math.cos(th);
          }
          const o = plan.batchOffset(g) + 2 * k;
          err = Math.max(err, Math.hypot(out[o]! - re, out[o + 1]! - im));
          ref = Math.max(ref, Math.hypot(re, im));
        }
        expect(err / ref).toBeLessThan(1e-13);
      }
    }
  });

  it("keeps earlier plans' outputs apart: each plan has its own buffers", () => {
    const a = new FFTPlan(16), b = new FFTPlan(16);
    const x = inputs(16, 1, 16, 1), y = inputs(16, 1, 16, 2);
    const oa = a.forwardBatch(x.src, x.so, 2, x.ss, 1, 16), first = Array.from(oa.subarray(a.batchOffset(0), a.batchOffset(0) + 32));
    b.forwardBatch(y.src, y.so, 2, y.ss, 1, 16);
    expect(Array.from(oa.subarray(a.batchOffset(0), a.batchOffset(0) + 32))).toEqual(first);
  });
});

describe("centredLines", () => {
  // the batched centred transform (fat-shift fit, ifft2c/fft2c) must give centredLine's numbers line by line
  it("equals centredLine on each line, bit for bit, along rows and columns, both signs, SIMD on and off", () => {
    for (const wasm of [true, false]) {
      setFftWasm(wasm);
      for (const [rows, cols] of [[1, 8], [5, 12], [16, 16], [19, 32], [64, 40]] as const) {
        const r = rng(rows * 100 + cols);
        const re = new Float64Array(rows * cols).map(() => r()), im = new Float64Array(rows * cols).map(() => r());
        for (const sign of [1, -1] as const) {
          const scale = sign === 1 ? 0.37 : 1;
          // along read (rows, step cols) and along phase (columns, step 1), a part of the lines only
          for (const [n, stride, offset, count, step] of [[cols, 1, cols, rows - 1, cols], [rows, cols, 1, cols - 2, 1]] as const) {
            if (count <= 0 || n < 1) continue;
            const aRe = re.slice(), aIm = im.slice(), bRe = re.slice(), bIm = im.slice();
            centredLines(aRe, aIm, n, stride, offset, count, step, sign, scale);
            for (let g = 0; g < count; g++) centredLine(bRe, bIm, n, stride, offset + g * step, sign, scale);
            let bad = 0;
            for (let i = 0; i < re.length; i++) if (!Object.is(aRe[i], bRe[i]) || !Object.is(aIm[i], bIm[i])) bad++;
            expect(bad, `${rows}×${cols} n ${n} sign ${sign} wasm ${wasm}`).toBe(0);
          }
        }
      }
    }
  });
});

describe("readAxis (the fast operator's read step)", () => {
  // oracle: the segment-by-segment form it replaced, one forwardStrided per line (the same numbers bit for bit),
  // and the direct DFT to rounding; segment counts that shrink the line groups (L > 16) and ragged last groups
  it("equals one transform per line and segment summed in segment order, bit for bit, and the direct DFT", () => {
    for (const wasm of [true, false]) {
      setFftWasm(wasm);
      for (const [L, NA] of [[1, 5], [7, 33], [20, 17], [48, 11]] as const) {
        const Mu = 64, ns = 40, r = rng(L * 100 + NA);
        const usedA = Int32Array.from([1, 2, 5, 9, 10, 11, 30, 31, 47]);
        const Zq = Array.from({ length: L }, () => Float64Array.from({ length: 2 * usedA.length * NA }, () => r()));
        const BL = Float64Array.from({ length: 2 * ns * L }, () => r());
        const colIdx = Int32Array.from({ length: ns }, (_, j) => (3 * j + 7) % Mu);
        const { dft, zt } = readStep(Mu, L, wasm, (n) => new Float64Array(n));
        const out = new Float64Array(2 * NA * ns);
        readAxis(Zq, NA, Mu, ns, BL, colIdx, dft, zt, out, usedA, wasm);
        const ref = new Float64Array(2 * NA * ns), line = new Float64Array(2 * Mu), single = new FFTPlan(Mu);
        let err = 0, norm = 0;
        for (let l = 0; l < L; l++) {
          for (let k = 0; k < NA; k++) {
            line.fill(0);
            usedA.forEach((a, i) => {
              line[2 * a] = Zq[l]![2 * (i * NA + k)]!;
              line[2 * a + 1] = Zq[l]![2 * (i * NA + k) + 1]!;
            });
            single.forwardStrided(line, 0, 2, usedA[usedA.length - 1]! + 1);
            for (let j = 0; j < ns; j++) {
              const fr = single.output[2 * colIdx[j]!]!, fi = single.output[2 * colIdx[j]! + 1]!, br = BL[2 * (j * L + l)]!, bi = BL[2 * (j * L + l) + 1]!, o = 2 * (k * ns + j);
              ref[o] = ref[o]! + (fr * br - fi * bi);
              ref[o + 1] = ref[o + 1]! + (fr * bi + fi * br);
            }
          }
        }
        let bad = 0;
        for (let i = 0; i < ref.length; i++) if (!Object.is(out[i], ref[i])) bad++;
        expect(bad, `L ${L}, NA ${NA}, wasm ${wasm}`).toBe(0);
        // the read step's jobs: the lines in parts (readPartStart), each part alone into an array holding other numbers
        for (const parts of [2, 3, 4]) {
          const pieces = Float64Array.from({ length: 2 * NA * ns }, () => 7);
          let covered = 0;
          for (let p = 0; p < parts; p++) {
            const k0 = readPartStart(p, parts, NA, L), k1 = readPartStart(p + 1, parts, NA, L);
            expect(k1).toBeGreaterThanOrEqual(k0);
            covered += k1 - k0;
            zt.fill(0);
            readAxis(Zq, NA, Mu, ns, BL, colIdx, dft, zt, pieces, usedA, wasm, k0, k1);
          }
          expect(covered).toBe(NA);
          let badPart = 0;
          for (let i = 0; i < ref.length; i++) if (!Object.is(pieces[i], ref[i])) badPart++;
          expect(badPart, `L ${L}, NA ${NA}, parts ${parts}, wasm ${wasm}`).toBe(0);
        }
        // the direct DFT of one line and segment sum, k = NA − 1, j = ns − 1
        const k = NA - 1, j = ns - 1;
        let dr = 0, di = 0;
        for (let l = 0; l < L; l++) {
          let sr = 0, si = 0;
          usedA.forEach((a, i) => {
            const th = (-2 * Math.PI * a * colIdx[j]!) / Mu, zr = Zq[l]![2 * (i * NA + k)]!, zi = Zq[l]![2 * (i * NA + k) + 1]!;
            sr += zr * Math.cos(th) - zi * Math.sin(th);
            si += zr * Math.sin(th) + zi * Math.cos(th);
          });
          const br = BL[2 * (j * L + l)]!, bi = BL[2 * (j * L + l) + 1]!;
          dr += sr * br - si * bi;
          di += sr * bi + si * br;
        }
        err = Math.hypot(out[2 * (k * ns + j)]! - dr, out[2 * (k * ns + j) + 1]! - di);
        norm = Math.hypot(dr, di);
        expect(err).toBeLessThan(1e-12 * Math.max(1, norm));
      }
    }
  });
});
