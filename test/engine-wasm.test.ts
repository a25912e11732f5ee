/**
 * The hand-assembled WebAssembly (engine/wasm-asm.ts, engine/wasm.ts): every
 * module is valid WebAssembly, the assembler's LEB128 matches published
 * examples, each kernel's TypeScript twin gives the kernel's bits, and a whole
 * simulation with WASM switched off gives the same k-space bits as with it on.
 */
import { describe, expect, test } from "vitest";
import { simulate, type SimulateInput } from "../src/index.js";
import { rfAffine } from "../src/engine/kernels.js";
import { readoutRecurrenceFast, rfAffineMany, WASM_MODULES, wasmKernel, wasmRfKernel } from "../src/engine/wasm.js";
import { pivotedBasis, projectLines } from "../src/engine/fast.js";
import { setBasisWasm } from "../src/engine/basis-wasm.js";
import { sleb, uleb } from "../src/engine/wasm-asm.js";
import { GAMMA } from "../src/constants.js";

/** Small deterministic generator (xorshift32), values in [0, 1). */
function rng(seed: number): () => number {
  let x = seed >>> 0 || 1;
  return () => {
    x ^= x << 13; x >>>= 0;
    x ^= x >>> 17;
    x ^= x << 5; x >>>= 0;
    return x / 4294967296;
  };
}

const sameBits = (a: Float64Array, b: Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength).equals(Buffer.from(b.buffer, b.byteOffset, b.byteLength));

describe("assembler", () => {
  test("LEB128 encodes the examples of the DWARF standard", () => {
    // DWARF Debugging Information Format, Version 4 (2010), section 7.6, the example tables of
    // unsigned and signed LEB128 (from memory); the WebAssembly binary format uses the same encoding.
    const unsigned: [number, number[]][] = [[2, [2]], [127, [127]], [128, [0x80, 1]], [129, [0x81, 1]], [130, [0x82, 1]], [12857, [0xb9, 100]]];
    for (const [n, bytes] of unsigned) expect(uleb(n)).toEqual(bytes);
    const signed: [number, number[]][] = [[2, [2]], [-2, [0x7e]], [127, [0xff, 0]], [-127, [0x81, 0x7f]], [128, [0x80, 1]], [-128, [0x80, 0x7f]], [129, [0x81, 1]], [-129, [0xff, 0x7e]]];
    for (const [n, bytes] of signed) expect(sleb(n)).toEqual(bytes);
    expect(uleb(0xffffffff)).toEqual([0xff, 0xff, 0xff, 0xff, 0x0f]);
    expect(() => uleb(-1)).toThrow(RangeError);
  });

  test.each(Object.keys(WASM_MODULES))("module %s passes WebAssembly.validate, and fails it with its last byte cut", (name) => {
    const bytes = WASM_MODULES[name]!();
    expect(WebAssembly.validate(bytes)).toBe(true);
    expect(WebAssembly.validate(bytes.slice(0, bytes.length - 1))).toBe(false);
  });

  test("the kernels instantiate here (else the twins would be compared with themselves)", () => {
    expect(wasmKernel()).not.toBeNull();
    expect(wasmRfKernel()).not.toBeNull();
  });
});

describe("TypeScript twins give the kernels' bits", () => {
  test("readout: odd and even group counts and sample counts", () => {
    const r = rng(11);
    for (const [groups, n] of [[1, 2], [2, 3], [3, 255], [5, 256], [8, 64], [13, 97], [64, 512]] as const) {
      const zr = new Float64Array(groups), zi = new Float64Array(groups), ar = new Float64Array(groups), ai = new Float64Array(groups);
      for (let g = 0; g < groups; g++) {
        zr[g] = r() - 0.5;
        zi[g] = r() - 0.5;
        const rho = Math.exp(-r() * 1e-2), th = (r() - 0.5) * 2 * Math.PI;
        ar[g] = rho * Math.cos(th);
        ai[g] = rho * Math.sin(th);
      }
      const on = [new Float64Array(n).fill(0.25), new Float64Array(n).fill(-0.5)] as const;
      const off = [new Float64Array(n).fill(0.25), new Float64Array(n).fill(-0.5)] as const;
      readoutRecurrenceFast(on[0], on[1], n, zr, zi, ar, ai, groups, true);
      readoutRecurrenceFast(off[0], off[1], n, zr, zi, ar, ai, groups, false);
      expect(sameBits(on[0], off[0]) && sameBits(on[1], off[1])).toBe(true);
      expect(on[0].some((x) => x !== 0.25)).toBe(true);
    }
  });

  test("RF maps: small and large step angles, on and off resonance, odd class counts", () => {
    const steps = 120, dt = 1e-5, b1re = new Float64Array(steps), b1im = new Float64Array(steps);
    for (let s = 0; s < steps; s++) {
      const x = ((s - steps / 2 + 0.5) / 15) * Math.PI;
      b1re[s] = (2e-5 * Math.sin(x)) / x;
      b1im[s] = s % 5 === 0 ? 3e-6 : 0;
    }
    b1re[0] = 0;
    const fs = [0, 0, 125.5, -3000, 40000, 7, -40000, 1e3, 2e3, -17.25, 250];
    const count = fs.length, r1 = fs.map((_, k) => 1 + k), r2 = fs.map((_, k) => 10 + 3 * k);
    const on = new Float64Array(12 * count), off = new Float64Array(12 * count);
    rfAffineMany(on, 0, count, fs, r1, r2, b1re, b1im, dt, GAMMA, true);
    rfAffineMany(off, 0, count, fs, r1, r2, b1re, b1im, dt, GAMMA, false);
    expect(sameBits(on, off)).toBe(true);
    // and both are the RF maps: the oracle rfAffine (checked against a direct Bloch simulation in engine.test.ts) to 1e-12
    const ref = new Float64Array(12 * count);
    for (let k = 0; k < count; k++) rfAffine(ref, 12 * k, b1re, b1im, dt, GAMMA, fs[k]!, r1[k]!, r2[k]!);
    for (let q = 0; q < ref.length; q++) expect(Math.abs(off[q]! - ref[q]!)).toBeLessThan(1e-12);
  });
});

describe("the pivoted Gram–Schmidt's sweep kernel (basis-wasm.ts) gives removeComponent's bits", () => {
  // the line and time factors of the fast operator (fast.ts pivotedBasis); columns of low rank plus noise,
  // some zero (skipped), lengths odd and even, counts above and below the kernel's threshold
  test("basis vectors and residuals bit for bit, kernel on and off; the basis is orthonormal", () => {
    for (const [m, count, rank] of [[128, 1344, 8], [256, 112, 12], [7, 700, 2], [300, 50, 30], [33, 9, 3]] as const) {
      const r = rng(m * 31 + count);
      const dirs = Array.from({ length: rank }, () => Float64Array.from({ length: 2 * m }, () => r() - 0.5));
      const y = new Float64Array(2 * m * count);
      for (let c = 0; c < count; c++) {
        if (c % 17 === 5) continue;
        for (const d of dirs) {
          const a = r() - 0.5, b = r() - 0.5;
          for (let k = 0; k < m; k++) {
            y[c * 2 * m + 2 * k] = y[c * 2 * m + 2 * k]! + (a * d[2 * k]! - b * d[2 * k + 1]!);
            y[c * 2 * m + 2 * k + 1] = y[c * 2 * m + 2 * k + 1]! + (a * d[2 * k + 1]! + b * d[2 * k]!);
          }
        }
        for (let k = 0; k < 2 * m; k++) y[c * 2 * m + k] = y[c * 2 * m + k]! + 1e-9 * (r() - 0.5);
      }
      const yOn = y.slice(), yOff = y.slice();
      const on = pivotedBasis(yOn, m, count, 1e-8, 48);
      const was = setBasisWasm(false);
      const off = pivotedBasis(yOff, m, count, 1e-8, 48);
      setBasisWasm(was);
      expect(on && off && on.length === off.length).toBe(true);
      expect(on!.length).toBeGreaterThanOrEqual(rank);
      for (let b = 0; b < on!.length; b++) expect(sameBits(on![b]!, off![b]!)).toBe(true);
      expect(sameBits(yOn, yOff)).toBe(true);
      // orthonormal to rounding (Gram–Schmidt twice: Giraud, Langou & Rozložník 2005)
      for (let a = 0; a < on!.length; a++) {
        for (let b = 0; b <= a; b++) {
          let pr = 0, pi = 0;
          for (let k = 0; k < m; k++) {
            pr += on![a]![2 * k]! * on![b]![2 * k]! + on![a]![2 * k + 1]! * on![b]![2 * k + 1]!;
            pi += on![a]![2 * k]! * on![b]![2 * k + 1]! - on![a]![2 * k + 1]! * on![b]![2 * k]!;
          }
          expect(Math.hypot(pr - (a === b ? 1 : 0), pi)).toBeLessThan(1e-12);
        }
      }
    }
  });
});

describe("the line factor's projection kernel (basis-wasm.ts project) gives addProjection's bits", () => {
  // coef[c·R + r] = Σ_k conj(b_r(k))·P[line_k·C + c], lines in order (some readouts skipped), sizes above the kernel's threshold
  test("coefficients bit for bit with the kernel on and off, and equal to the sum written out", () => {
    for (const [NA, C, R, readouts] of [[128, 1344, 8, 130], [40, 300, 5, 40], [64, 97, 1, 70]] as const) {
      const r = rng(NA * 7 + C);
      const P = Float64Array.from({ length: 2 * readouts * C }, () => r() - 0.5);
      const lines = Array.from({ length: NA }, (_, k) => (k * readouts) / NA | 0);
      const basis = Array.from({ length: R }, () => Float64Array.from({ length: 2 * NA }, () => r() - 0.5));
      const on = projectLines(basis, P, lines, C, true);
      const was = setBasisWasm(false);
      const off = projectLines(basis, P, lines, C, true);
      setBasisWasm(was);
      expect(sameBits(on, off)).toBe(true);
      const direct = new Float64Array(2 * C * R);
      for (let c = 0; c < C; c++) {
        for (let b = 0; b < R; b++) {
          let re = 0, im = 0;
          for (let k = 0; k < NA; k++) {
            const br = basis[b]![2 * k]!, bi = basis[b]![2 * k + 1]!, xr = P[2 * (lines[k]! * C + c)]!, xi = P[2 * (lines[k]! * C + c) + 1]!;
            re = re + (br * xr + bi * xi);
            im = im + (br * xi - bi * xr);
          }
          direct[2 * (c * R + b)] = re;
          direct[2 * (c * R + b) + 1] = im;
        }
      }
      expect(sameBits(on, direct)).toBe(true);
    }
  });
});

describe("a simulation with WASM off gives the same k-space bits as with it on", () => {
  const PHANTOM = {
    name: "wasm-two-discs",
    tissues: {
      gel: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "40 ms", species: "water" },
      oil: { pd: 0.9, t1: "250 ms", t2: "70 ms", t2star: "30 ms", species: "fat" },
    },
    shapes: [
      { shape: "ellipse", center: ["-3 cm", "0 cm"], semiAxes: ["3 cm", "4 cm"], tissue: "gel" },
      { shape: "ellipse", center: ["4 cm", "1 cm"], semiAxes: ["2 cm", "3 cm"], tissue: "oil" },
    ],
    // a field that varies over the object: many RF classes, so the RF kernels pair classes in their lanes
    b0: { expression: "30 * (x / 0.1) + 20 * (y / 0.1)^2" },
  };
  const base = {
    field: "1.5 T", fov: { read: "16 cm", phase: "16 cm" }, matrix: { read: 16, phase: 16 },
    slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, bandwidth: "300 Hz/px",
  };
  const cases: [string, Record<string, unknown>][] = [
    ["ideally spoiled gradient echo (spoiled shortcut)", { ...base, sequence: "gre", te: "5 ms", tr: "15 ms", flip: "25 deg", dummyScans: 4 }],
    ["spin echo (general path)", { ...base, sequence: "se", te: "20 ms", tr: "200 ms" }],
  ];
  test.each(cases)("%s", async (_name, protocol) => {
    const input: SimulateInput = {
      protocol, phantom: PHANTOM, readout: "direct", chunkIsochromats: 256,
      iso: { density: 2, sliceCount: 3, sliceExtent: 3, t2primeIsochromats: 1, fatModel: "multi" },
    };
    const on = await simulate({ ...input, wasm: true });
    const off = await simulate({ ...input, wasm: false });
    expect(sameBits(on.kspace.re, off.kspace.re)).toBe(true);
    expect(sameBits(on.kspace.im, off.kspace.im)).toBe(true);
    // not an empty k-space (the comparison means something); the oracle kernels (readoutRecurrence, rfAffine) agree to rounding only
    let energy = 0;
    for (let i = 0; i < on.kspace.re.length; i++) energy += on.kspace.re[i]! ** 2 + on.kspace.im[i]! ** 2;
    expect(energy).toBeGreaterThan(1);
  });
});
