/**
 * `--mask random --exact`: exactly round(N/R) lines per slice-encoding step.
 * Checks: the count (the definition of the option), the ACS lines always in,
 * partial Fourier respected, and that lines are drawn by the variable density
 * (weighted sampling without replacement, Efraimidis and Spirakis 2006: a line
 * with the larger weight is drawn at least as often; here the centre against
 * the edge over many seeds).
 */
import { describe, expect, it } from "vitest";
import { checkMaskOptions, makeMask, randomDensity, type MaskOptions } from "../src/dataset/masks.js";
import { Rng } from "../src/dataset/prng.js";
import { UserError } from "../src/errors.js";

describe("random mask with --exact", () => {
  it("hits N/R lines exactly on every slice-encoding step for many seeds, ACS included, while the plain random mask varies", () => {
    const o: MaskOptions = { kind: "random", accel: 4, acs: 8, partialFourier: 1, exact: true };
    const N = 96, P = 3;
    const plainCounts = new Set<number>();
    for (let seed = 0; seed < 50; seed++) {
      const m = makeMask(P, N, o, Rng.stream(seed, 0, 2));
      for (let p = 0; p < P; p++) {
        let n = 0;
        for (let y = 0; y < N; y++) n += m.data[p * N + y]!;
        expect(n).toBe(24);
        for (let y = 44; y < 52; y++) expect(m.data[p * N + y]).toBe(1);
      }
      expect(m.acceleration).toBe(4);
      const plain = makeMask(1, N, { ...o, exact: false }, Rng.stream(seed, 0, 2));
      plainCounts.add(plain.data.reduce((a, b) => a + b, 0));
    }
    expect(plainCounts.size).toBeGreaterThan(1);
  });

  it("draws by the density: over 400 seeds a line next to the ACS block is drawn more often than an edge line, and each line's frequency is ≤ 1", () => {
    const o: MaskOptions = { kind: "random", accel: 3, acs: 4, partialFourier: 1, exact: true };
    const N = 48, freq = new Float64Array(N);
    for (let seed = 0; seed < 400; seed++) {
      const m = makeMask(1, N, o, Rng.stream(seed, 1, 2));
      for (let y = 0; y < N; y++) freq[y]! += m.data[y]! / 400;
    }
    const p = randomDensity(N, 3, 4);
    expect(p[21]!).toBeGreaterThan(p[2]!);
    expect(freq[21]!).toBeGreaterThan(freq[2]! + 0.1);
    expect(freq.reduce((a, b) => a + b, 0)).toBeCloseTo(16, 10);
  });

  it("partial Fourier: no line before N − round(F·N); refused where the kept lines cannot hold N/R lines, and for other masks", () => {
    const o: MaskOptions = { kind: "random", accel: 2, acs: 6, partialFourier: 0.75, exact: true };
    const m = makeMask(1, 64, o, Rng.stream(3, 0, 2));
    expect(Array.from(m.data.subarray(0, 16)).every((v) => v === 0)).toBe(true);
    expect(m.data.reduce((a, b) => a + b, 0)).toBe(32);
    expect(() => checkMaskOptions({ ...o, accel: 1.2, acs: 0 }, 1, 64)).toThrow(UserError);
    expect(() => checkMaskOptions({ ...o, kind: "uniform", accel: 2 }, 1, 64)).toThrow(/--exact/);
  });
});
