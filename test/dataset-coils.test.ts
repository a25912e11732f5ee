import { describe, expect, it } from "vitest";
import {
  cellsEnclosureMargin, ellipticKE, ellipticKEMany, enclosureMargin, loopField, loopFieldLocal, loopPlacement, sensitivitiesAt, sensitivityScale, MU0, type CoilArray,
} from "../src/dataset/coils.js";
import { ellipticKEWasm, setEllipticWasm } from "../src/dataset/elliptic-wasm.js";

/** Slow direct Biot–Savart sum, dB = μ0·I/(4π)·dl × (p − l)/|p − l|³, over n straight pieces (midpoint rule; periodic integrand). */
function biotSavartDirect(a: number, c: number[], nrm: number[], p: number[], n: number): number[] {
  // orthonormal e1, e2 in the loop plane with e1 × e2 = n (current runs e1 → e2)
  const t = Math.abs(nrm[2]!) < 0.9 ? [0, 0, 1] : [1, 0, 0];
  const cross = (u: number[], v: number[]) => [u[1]! * v[2]! - u[2]! * v[1]!, u[2]! * v[0]! - u[0]! * v[2]!, u[0]! * v[1]! - u[1]! * v[0]!];
  let e1 = cross(t, nrm);
  const l1 = Math.hypot(...e1);
  e1 = e1.map((v) => v / l1);
  const e2 = cross(nrm, e1);
  const B = [0, 0, 0];
  for (let k = 0; k < n; k++) {
    const th = (2 * Math.PI * (k + 0.5)) / n;
    const pos = [0, 1, 2].map((i) => c[i]! + a * (Math.cos(th) * e1[i]! + Math.sin(th) * e2[i]!));
    const dl = [0, 1, 2].map((i) => ((2 * Math.PI * a) / n) * (-Math.sin(th) * e1[i]! + Math.cos(th) * e2[i]!));
    const r = [0, 1, 2].map((i) => p[i]! - pos[i]!);
    const r3 = Math.hypot(...r) ** 3;
    const d = cross(dl, r);
    for (let i = 0; i < 3; i++) B[i]! += ((MU0 / (4 * Math.PI)) * d[i]!) / r3;
  }
  return B;
}

describe("coil field (Biot–Savart)", () => {
  it("ellipticKE satisfies Legendre's relation E·K' + E'·K − K·K' = π/2 within 1e-14", () => {
    // Legendre's relation, Abramowitz & Stegun 17.3.13
    const a = new Float64Array(2), b = new Float64Array(2);
    for (const m of [0.01, 0.2, 0.5, 0.7, 0.95]) {
      ellipticKE(m, a);
      ellipticKE(1 - m, b);
      expect(Math.abs(a[1]! * b[0]! + b[1]! * a[0]! - a[0]! * b[0]! - Math.PI / 2)).toBeLessThan(1e-14);
    }
    ellipticKE(0.5, a);
    // K(1/2) = 1.854074677301372, E(1/2) = 1.350643881047675 (Abramowitz & Stegun Table 17.1; from memory)
    expect(a[0]).toBeCloseTo(1.854074677301372, 13);
    expect(a[1]).toBeCloseTo(1.350643881047675, 13);
  });

  it("loopFieldLocal on the axis equals μ0·I·R²/(2(R²+z²)^{3/2}) within 1e-13 relative", () => {
    // closed form of the Biot–Savart law on the axis of a circular loop (any electromagnetism text, e.g. Jackson, Classical Electrodynamics, §5.5)
    const out = new Float64Array(2);
    for (const R of [0.02, 0.07]) {
      for (const z of [-0.2, -0.03, 0, 0.01, 0.05, 0.3]) {
        loopFieldLocal(out, R, 2.5, 0, z);
        const want = (MU0 * 2.5 * R * R) / (2 * (R * R + z * z) ** 1.5);
        expect(Math.abs(out[1]! - want) / want).toBeLessThan(1e-13);
        expect(Math.abs(out[0]!)).toBe(0);
      }
    }
  });

  it("loopField off the axis matches a direct Biot–Savart sum over 4000 pieces within 1e-9 relative", () => {
    const B = new Float64Array(3);
    const c = [0.1, -0.02, 0.03], n = [Math.cos(0.4), Math.sin(0.4), 0];
    const pts = [[0, 0, 0], [0.05, 0.04, 0.01], [0.12, 0.05, -0.04], [0.2, 0, 0.03], [0.1 + 0.06 * n[0]!, -0.02 + 0.06 * n[1]!, 0.03 + 1e-9]];
    for (const p of pts) {
      loopField(B, 0.05, c[0]!, c[1]!, c[2]!, n[0]!, n[1]!, n[2]!, p[0]!, p[1]!, p[2]!);
      const ref = biotSavartDirect(0.05, c, n, p, 4000);
      const err = Math.hypot(B[0]! - ref[0]!, B[1]! - ref[1]!, B[2]! - ref[2]!) / Math.hypot(...ref);
      expect(err).toBeLessThan(1e-9);
    }
  });

  const ring: CoilArray = { elements: 8, rows: 2, loopRadius: 0.06, arrayRadius: 0.15, rowSpacing: 0.1, zCentre: 0.01 };

  it("sensitivitiesAt gives S = (Bx − i·By)/κ with Σ|S|² = 1 at the array centre and phase −φ on each loop's axis", () => {
    const n = 16;
    const x = new Float64Array(1), y = new Float64Array(1), z = Float64Array.of(ring.zCentre);
    const S = new Float64Array(2 * n);
    sensitivitiesAt(ring, x, y, z, 1, S, 1);
    let rss = 0;
    for (let c = 0; c < n; c++) rss += S[2 * c]! ** 2 + S[2 * c + 1]! ** 2;
    expect(Math.abs(rss - 1)).toBeLessThan(1e-12);
    // reciprocity with Mxy ∝ exp(−iω0t): S ∝ Bx − i·By (Hoult 2000); a loop at azimuth φ, normal (cosφ, sinφ, 0): on its axis B ∥ normal, so arg S = −φ
    const pl = loopPlacement(ring);
    const B = new Float64Array(3);
    const kappa = sensitivityScale(ring);
    for (let q = 0; q < n; q++) {
      const { centre: c, normal: nn } = pl[q]!;
      const p = [c[0] - 0.05 * nn[0], c[1] - 0.05 * nn[1], c[2]];
      const one = new Float64Array(2 * n);
      sensitivitiesAt(ring, [p[0]!], [p[1]!], [p[2]!], 1, one, 1);
      loopField(B, ring.loopRadius, c[0], c[1], c[2], nn[0], nn[1], nn[2], p[0]!, p[1]!, p[2]!);
      expect(one[2 * q]).toBeCloseTo(B[0]! / kappa, 12);
      expect(one[2 * q + 1]).toBeCloseTo(-B[1]! / kappa, 12);
      const phi = (2 * Math.PI * (q % 8)) / 8;
      const arg = Math.atan2(one[2 * q + 1]!, one[2 * q]!);
      const d = Math.atan2(Math.sin(arg + phi), Math.cos(arg + phi));
      expect(Math.abs(d)).toBeLessThan(1e-9);
    }
  });

  it("sensitivitiesAt (points in batches) gives the bits of loopField point by point; ellipticKEMany those of ellipticKE", () => {
    let seed = 11;
    const rnd = () => ((seed = (seed * 1103515245 + 12345) % 2147483648) / 2147483648);
    const n = 150, x = new Float64Array(n), y = new Float64Array(n), z = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      x[i] = (rnd() - 0.5) * 0.25;
      y[i] = (rnd() - 0.5) * 0.25;
      z[i] = (rnd() - 0.5) * 0.2;
    }
    // points on and next to loop 0's axis (the near-axis series) and at the centre
    x[0] = 0; y[0] = 0; z[0] = ring.zCentre - ring.rowSpacing / 2;
    x[1] = 0.05; y[1] = 1e-9; z[1] = ring.zCentre - ring.rowSpacing / 2;
    const C = 16, out = new Float64Array(2 * C * n);
    sensitivitiesAt(ring, x, y, z, n, out, n);
    const kappa = sensitivityScale(ring), B = new Float64Array(3);
    loopPlacement(ring).forEach(({ centre: c, normal: nr }, q) => {
      for (let i = 0; i < n; i++) {
        loopField(B, ring.loopRadius, c[0], c[1], c[2], nr[0], nr[1], nr[2], x[i]!, y[i]!, z[i]!);
        expect(out[2 * (q * n + i)]).toBe(B[0]! / kappa);
        expect(out[2 * (q * n + i) + 1]).toBe(-B[1]! / kappa);
      }
    });
    const m = Float64Array.from({ length: 70 }, (_, i) => (i === 69 ? 1 - 1e-15 : i / 69)), K = new Float64Array(70), E = new Float64Array(70), one = new Float64Array(2);
    ellipticKEMany(m, 70, K, E);
    for (let i = 0; i < 70; i++) {
      ellipticKE(m[i]!, one);
      expect(K[i]).toBe(one[0]);
      expect(E[i]).toBe(one[1]);
    }
  });

  it("the SIMD kernel of the elliptic integrals (elliptic-wasm.ts) gives the bits of ellipticKE, an odd count and converged lanes included", () => {
    // m from 0 to 1 − 2⁻⁵², very small m (one iteration or none), and NaN: each lane iterates on its own while its pair goes on
    let seed = 5;
    const rnd = () => ((seed = (seed * 1103515245 + 12345) % 2147483648) / 2147483648);
    for (const n of [1, 2, 7, 63, 64]) {
      const m = Float64Array.from({ length: n }, (_, i) => (i % 4 === 0 ? rnd() : i % 4 === 1 ? 1 - 10 ** (-16 * rnd()) : i % 4 === 2 ? 10 ** (-30 * rnd()) : rnd() ** 8));
      if (n === 64) {
        m[0] = 0;
        m[1] = 1 - 2 ** -52;
        m[2] = NaN;
        m[3] = 1e-300;
      }
      const K = new Float64Array(n), E = new Float64Array(n), one = new Float64Array(2);
      expect(ellipticKEWasm(m, n, K, E)).toBe(true);
      for (let i = 0; i < n; i++) {
        ellipticKE(m[i]!, one);
        expect(Object.is(K[i], one[0]) && Object.is(E[i], one[1])).toBe(true);
      }
    }
    // switched off: nothing written, the TypeScript runs instead
    const was = setEllipticWasm(false);
    try {
      expect(ellipticKEWasm(new Float64Array([0.5]), 1, new Float64Array(1), new Float64Array(1))).toBe(false);
    } finally {
      setEllipticWasm(was);
    }
  });

  it("enclosureMargin is negative for points inside every loop plane and positive beyond one", () => {
    expect(enclosureMargin(ring, [0, 0.1, -0.1], [0, 0.05, 0], 3)).toBeLessThan(0);
    expect(enclosureMargin(ring, [0, 0.16], [0, 0], 2)).toBeCloseTo(0.01, 12);
  });

  it("cellsEnclosureMargin equals enclosureMargin over every cell centre (columns of cells, oblique axes)", () => {
    // seeded columns of random through-slice entries on an oblique slice; the slow oracle makes every centre
    let seed = 7;
    const rnd = () => ((seed = (seed * 1103515245 + 12345) % 2147483648) / 2147483648);
    const th = 0.4, ph = 0.7;
    const read = [Math.cos(th), Math.sin(th), 0];
    const phase = [-Math.sin(th) * Math.cos(ph), Math.cos(th) * Math.cos(ph), Math.sin(ph)];
    const slice = [read[1]! * phase[2]! - read[2]! * phase[1]!, read[2]! * phase[0]! - read[0]! * phase[2]!, read[0]! * phase[1]! - read[1]! * phase[0]!];
    const uGrid = Array.from({ length: 40 }, (_, i) => (i - 20) * 0.004), vGrid = Array.from({ length: 30 }, (_, i) => (i - 15) * 0.004);
    const wGrid = Array.from({ length: 9 }, (_, i) => (i - 4) * 0.01);
    const colA: number[] = [], colB: number[] = [], entStart = [0], entW: number[] = [];
    for (let c = 0; c < 300; c++) {
      colA.push(Math.floor(rnd() * uGrid.length));
      colB.push(Math.floor(rnd() * vGrid.length));
      const n = Math.floor(rnd() * 4);
      for (let k = 0; k < n; k++) entW.push(Math.floor(rnd() * wGrid.length));
      entStart.push(entW.length);
    }
    const cells = { columns: 300, colA, colB, entStart, entW, uGrid, vGrid, wGrid, ctx: { axes: { read, phase, slice } } };
    const xs: number[] = [], ys: number[] = [];
    for (let c = 0; c < 300; c++) {
      for (let e = entStart[c]!; e < entStart[c + 1]!; e++) {
        const u = uGrid[colA[c]!]!, v = vGrid[colB[c]!]!, w = wGrid[entW[e]!]!;
        xs.push(read[0]! * u + phase[0]! * v + slice[0]! * w);
        ys.push(read[1]! * u + phase[1]! * v + slice[1]! * w);
      }
    }
    for (const arrayRadius of [0.2, 0.11, 0.06]) {
      const a = { ...ring, arrayRadius };
      const slow = enclosureMargin(a, xs, ys, xs.length);
      expect(Math.abs(cellsEnclosureMargin(a, cells) - slow)).toBeLessThan(1e-15);
    }
    expect(cellsEnclosureMargin({ ...ring, elements: 0 }, cells)).toBe(-Infinity);
  });
});
