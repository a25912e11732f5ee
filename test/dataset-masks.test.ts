import { describe, expect, it } from "vitest";
import { checkMaskOptions, makeMask, randomDensity, type MaskOptions } from "../src/dataset/masks.js";
import { Rng } from "../src/dataset/prng.js";
import { UserError } from "../src/errors.js";

const opt = (o: Partial<MaskOptions>): MaskOptions => ({ kind: "full", accel: 1, acs: 0, partialFourier: 1, ...o });
const lines = (m: { data: Uint8Array }, from = 0, n = m.data.length) => Array.from(m.data.subarray(from, from + n));

describe("sampling masks", () => {
  it("uniform R = 4 without centre lines samples every 4th line through k = 0: acceleration exactly 4", () => {
    // common practice: regular undersampling keeps lines (y − c) ≡ 0 mod R, c = floor(N/2) is k = 0
    const m = makeMask(1, 32, opt({ kind: "uniform", accel: 4 }), Rng.stream(1, 0, 2));
    const on = lines(m).flatMap((v, y) => (v ? [y] : []));
    expect(on).toEqual([0, 4, 8, 12, 16, 20, 24, 28]);
    expect(m.acceleration).toBe(4);
  });

  it("uniform R = 3 with 8 centre lines: lines 12…19 all sampled, others on the R grid, acceleration = N/count", () => {
    const m = makeMask(2, 32, opt({ kind: "uniform", accel: 3, acs: 8 }), Rng.stream(1, 0, 2));
    const want: number[] = Array.from({ length: 32 }, (_, y) => ((y >= 12 && y < 20) || (y - 16) % 3 === 0 ? 1 : 0));
    expect(lines(m, 0, 32)).toEqual(want);
    expect(lines(m, 32, 32)).toEqual(want);
    const count = want.reduce((a, b) => a + b, 0);
    expect(m.acceleration).toBeCloseTo(32 / count, 12);
  });

  it("random mask: stated density sums to N/R and the empirical line frequency over 4000 slice-encoding steps matches it within 5 standard errors", () => {
    const N = 48, R = 3, acs = 6, P = 4000;
    const p = randomDensity(N, R, acs);
    expect(p.reduce((a, b) => a + b, 0)).toBeCloseTo(N / R, 9);
    for (let y = 21; y < 27; y++) expect(p[y]).toBe(1);
    // p(y) = min(1, λ(1 − d)²) is non-increasing in |y − c| outside the centre
    for (let y = 1; y < 21; y++) expect(p[y]!).toBeGreaterThanOrEqual(p[y - 1]!);
    const m = makeMask(P, N, opt({ kind: "random", accel: R, acs }), Rng.stream(9, 0, 2));
    for (let y = 0; y < N; y++) {
      let f = 0;
      for (let q = 0; q < P; q++) f += m.data[q * N + y]!;
      f /= P;
      // Bernoulli frequency: standard error sqrt(p(1 − p)/P)
      expect(Math.abs(f - p[y]!)).toBeLessThanOrEqual(5 * Math.sqrt((p[y]! * (1 - p[y]!)) / P) + 1e-12);
    }
  });

  it("poisson mask over 40×40: no two samples outside the centre closer than r, maximal (every gap within r of a sample), count near N·P/R", () => {
    const P = 40, N = 40, R = 5, acs = 6;
    const m = makeMask(P, N, opt({ kind: "poisson", accel: R, acs }), Rng.stream(4, 0, 2));
    const r = m.radius!;
    const pts: [number, number][] = [];
    for (let q = 0; q < P; q++) for (let y = 0; y < N; y++) if (m.data[q * N + y]) pts.push([q, y]);
    const inAcs = (q: number, y: number) => q >= 17 && q < 23 && y >= 17 && y < 23;
    for (let a = 0; a < pts.length; a++) for (let b = a + 1; b < pts.length; b++) {
      const [q1, y1] = pts[a]!, [q2, y2] = pts[b]!;
      if (inAcs(q1, y1) && inAcs(q2, y2)) continue;
      expect((q1 - q2) ** 2 + (y1 - y2) ** 2).toBeGreaterThanOrEqual(r * r - 1e-9);
    }
    for (let q = 0; q < P; q++) for (let y = 0; y < N; y++) {
      if (m.data[q * N + y]) continue;
      expect(pts.some(([a, b]) => (a - q) ** 2 + (b - y) ** 2 < r * r)).toBe(true);
    }
    expect(Math.abs(pts.length - (P * N) / R) / ((P * N) / R)).toBeLessThan(0.1);
  });

  it("partial Fourier 0.75 removes the first N − round(0.75·N) lines and keeps k = 0", () => {
    const m = makeMask(1, 32, opt({ partialFourier: 0.75 }), Rng.stream(1, 0, 2));
    expect(lines(m)).toEqual(Array.from({ length: 32 }, (_, y) => (y >= 8 ? 1 : 0)));
  });

  it("checkMaskOptions rejects an unknown mask, R above the lines, more centre lines than lines, each naming its option", () => {
    const bad: [Partial<MaskOptions>, RegExp][] = [
      [{ kind: "spiral" as never }, /^--mask: unknown mask "spiral"/],
      [{ kind: "uniform", accel: 40 }, /^--accel: acceleration 40 is larger than the 32 phase lines/],
      [{ kind: "uniform", accel: 2, acs: 33 }, /^--acs: 33 centre \(ACS\) lines are more than the 32 phase lines/],
      [{ kind: "random", accel: 4, acs: 12 }, /^--acs: /],
      [{ kind: "uniform", accel: 2.5 }, /^--accel: /],
      [{ partialFourier: 0.5 }, /^--partial-fourier: /],
    ];
    for (const [o, re] of bad) {
      expect(() => checkMaskOptions(opt(o), 1, 32)).toThrow(UserError);
      expect(() => checkMaskOptions(opt(o), 1, 32)).toThrow(re);
    }
  });
});
