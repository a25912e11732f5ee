/**
 * Off-resonance models: the susceptibility sphere and cylinder against an
 * independent Fourier-domain dipole calculation, the field map sampler, the
 * shim offset, and a susceptibility sphere distorting a simulated image.
 */
import { describe, expect, test } from "vitest";
import { mkdtempSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { chiFieldRatio, fieldMapSampler, parsePhantom, type ChiObject } from "../src/phantom/index.js";
import { fft3c, ifft3c } from "../src/recon/fft.js";
import { encodeNpy, decodeNpy } from "../src/io/npy.js";
import { GAMMA_BAR } from "../src/constants.js";
import { readFileSync } from "node:fs";
import { parseProtocolObject } from "../src/protocol/index.js";
import { protocolObject, simulate } from "./effects-helpers.js";

/**
 * ΔB/B0 of a Δχ distribution on a periodic n³ grid by the Fourier dipole kernel
 * D(k) = 1/3 − kz²/|k|² (D(0) = 0), the Lorentz-corrected field to first order
 * (Salomir, de Senneville & Moonen 2003, Concepts Magn. Reson. B 19:26; Marques &
 * Bowtell 2005, Concepts Magn. Reson. B 25:65; from memory). Independent of the
 * closed forms: it only knows χ(r).
 */
function dipoleFft(chi: Float64Array, n: number): Float64Array {
  const re = Float64Array.from(chi), im = new Float64Array(chi.length);
  fft3c(re, im, n, n, n);
  const c = Math.floor(n / 2);
  for (let z = 0; z < n; z++) for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) {
    const kx = x - c, ky = y - c, kz = z - c, k2 = kx * kx + ky * ky + kz * kz;
    const d = k2 === 0 ? 0 : 1 / 3 - (kz * kz) / k2;
    const i = (z * n + y) * n + x;
    re[i] = re[i]! * d;
    im[i] = im[i]! * d;
  }
  ifft3c(re, im, n, n, n);
  return re;
}

/** Δχ map of an object on an n³ grid (spacing h, centred), 4³ sub-samples per voxel for partial volume. */
function chiMap(n: number, h: number, inside: (x: number, y: number, z: number) => boolean, dchi: number): Float64Array {
  const out = new Float64Array(n ** 3), c = Math.floor(n / 2), s = 4;
  for (let z = 0; z < n; z++) for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) {
    let k = 0;
    for (let a = 0; a < s; a++) for (let b = 0; b < s; b++) for (let d = 0; d < s; d++) {
      if (inside((x - c + (a + 0.5) / s - 0.5) * h, (y - c + (b + 0.5) / s - 0.5) * h, (z - c + (d + 0.5) / s - 0.5) * h)) k++;
    }
    out[(z * n + y) * n + x] = (dchi * k) / s ** 3;
  }
  return out;
}

describe("susceptibility closed forms vs a Fourier dipole calculation", () => {
  const n = 64, h = 1e-3, dchi = 9.41e-6; // air in water: +0.36 − (−9.05) ppm (Schenck 1996)
  test("sphere: field outside and inside agrees within 3 % of the pole value (Schenck 1996)", () => {
    const a = 7e-3;
    const sphere: ChiObject = { shape: "sphere", center: [0, 0, 0], radius: a, deltaChi: dchi };
    const field = dipoleFft(chiMap(n, h, (x, y, z) => x * x + y * y + z * z <= a * a, dchi), n);
    const c = n / 2;
    let worst = 0, count = 0;
    for (let z = 0; z < n; z += 2) for (let y = 0; y < n; y += 2) for (let x = 0; x < n; x += 2) {
      const px = (x - c) * h, py = (y - c) * h, pz = (z - c) * h, r = Math.hypot(px, py, pz);
      if (Math.abs(r - a) < 1.5 * h || r > 20 * h) continue; // skip the staircase at the surface and the periodic far field
      const e = Math.abs(field[(z * n + y) * n + x]! - chiFieldRatio(sphere, px, py, pz));
      worst = Math.max(worst, e);
      count++;
    }
    expect(count).toBeGreaterThan(500);
    expect(worst / ((2 * dchi) / 3)).toBeLessThan(0.03);
    // worked by hand from the closed form (Schenck 1996, Med Phys 23:815) at 3 T: Δχ = 9.41 ppm, pole +801 Hz, equator −401 Hz at r = a
    const hz = GAMMA_BAR * 3;
    expect(chiFieldRatio(sphere, 0, 0, a * (1 + 1e-12)) * hz).toBeCloseTo(801, -1);
    expect(chiFieldRatio(sphere, a * (1 + 1e-12), 0, 0) * hz).toBeCloseTo(-401, -1);
  }, 60_000);

  test("infinite cylinder along x (⟂ B0): field outside and inside agrees within 3 % (Ogawa et al. 1993)", () => {
    const a = 6e-3, m = 256; // infinite along x: a 2D problem, on a larger m × m grid (nx = 1)
    const cyl: ChiObject = { shape: "cylinder", center: [0, 0, 0], radius: a, direction: [1, 0, 0], deltaChi: dchi };
    const chi = new Float64Array(m * m), c = m / 2, s = 4;
    for (let z = 0; z < m; z++) for (let y = 0; y < m; y++) {
      let k = 0;
      for (let p = 0; p < s; p++) for (let q = 0; q < s; q++) {
        const py = (y - c + (p + 0.5) / s - 0.5) * h, pz = (z - c + (q + 0.5) / s - 0.5) * h;
        if (py * py + pz * pz <= a * a) k++;
      }
      chi[z * m + y] = (dchi * k) / (s * s);
    }
    const re = Float64Array.from(chi), im = new Float64Array(m * m);
    fft3c(re, im, m, m, 1);
    for (let z = 0; z < m; z++) for (let y = 0; y < m; y++) {
      const ky = y - c, kz = z - c, k2 = ky * ky + kz * kz, d = k2 === 0 ? 0 : 1 / 3 - (kz * kz) / k2;
      re[z * m + y] = re[z * m + y]! * d; im[z * m + y] = im[z * m + y]! * d;
    }
    ifft3c(re, im, m, m, 1);
    let worst = 0;
    for (let z = 0; z < m; z++) for (let y = 0; y < m; y++) {
      const py = (y - c) * h, pz = (z - c) * h, r = Math.hypot(py, pz);
      if (Math.abs(r - a) < 1.5 * h || r > 30 * h) continue;
      worst = Math.max(worst, Math.abs(re[z * m + y]! - chiFieldRatio(cyl, 0, py, pz)));
    }
    expect(worst / (dchi / 2)).toBeLessThan(0.03);
    // inside, ⟂ B0: −Δχ/6; outside at φ = 0 (along z), r = a: +Δχ/2 → +601 Hz at 3 T (worked by hand from the closed form, Schenck 1996)
    expect(chiFieldRatio(cyl, 0, 0, 0)).toBeCloseTo(-dchi / 6, 12);
    expect(chiFieldRatio(cyl, 0, 0, a * (1 + 1e-12)) * GAMMA_BAR * 3).toBeCloseTo(601, -1);
  }, 60_000);
});

describe("bad b0 input is a one-line user error naming the key path", () => {
  const base = () => ({ name: "e", shapes: [{ shape: "rectangle", center: ["0 cm", "0 cm"], size: ["2 cm", "2 cm"], tissue: "water-gel" }] } as Record<string, unknown>);
  const cases: [unknown, string][] = [
    [{ susceptibility: { objects: [{ shape: "cube", center: ["0 cm", "0 cm", "0 cm"], radius: "1 cm", deltaChi: "1 ppm" }] } }, "b0.susceptibility.objects[0].shape"],
    [{ susceptibility: { objects: [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "1 cm", deltaChi: "9 deg" }] } }, "b0.susceptibility.objects[0].deltaChi"],
    [{ susceptibility: { objects: [{ shape: "cylinder", center: ["0 cm", "0 cm", "0 cm"], radius: "1 cm", deltaChi: "1 ppm", direction: [0, 0, 0] }] } }, "b0.susceptibility.objects[0].direction"],
    [{ susceptibility: { objects: [{ shape: "sphere", center: ["0 cm", "0 cm"], radius: "1 cm", deltaChi: "1 ppm" }] } }, "b0.susceptibility.objects[0].center"],
    [{ fieldMap: { file: "m.npy", origin: ["0 cm", "0 cm", "0 cm"] } }, "b0.fieldMap.spacing"],
    [{ fieldMap: { file: "m.npy", origin: ["0 cm", "0 cm", "0 cm"], spacing: ["1 mm", "1 mm", "1 mm"], grid: 1 } }, "b0.fieldMap.grid"],
  ];
  for (const [b0, path] of cases) {
    test(`${path}`, () => {
      const j = base();
      j.b0 = b0;
      let err: unknown;
      try { parsePhantom(j, "p.json", 3, { readArray: () => ({ shape: [2, 2], data: [0, 0, 0, 0] }) }); } catch (e) { err = e; }
      expect((err as { keyPath?: string }).keyPath).toBe(path);
    });
  }
  test("a field map of the wrong rank or with non-finite values is refused", () => {
    for (const arr of [{ shape: [4], data: [0, 0, 0, 0] }, { shape: [1, 2], data: [0, NaN] }]) {
      const j = base();
      j.b0 = { fieldMap: { file: "m.npy", origin: ["0 cm", "0 cm", "0 cm"], spacing: ["1 mm", "1 mm", "1 mm"] } };
      let err: unknown;
      try { parsePhantom(j, "p.json", 3, { readArray: () => arr }); } catch (e) { err = e; }
      expect((err as { keyPath?: string }).keyPath).toBe("b0.fieldMap.file");
    }
  });
});

describe("field map and shim", () => {
  test("fieldMapSampler interpolates trilinearly and holds edge values outside", () => {
    // a linear map f = 10·i + 100·j + 1000·k is reproduced exactly by trilinear interpolation
    const nx = 4, ny = 3, nz = 2, data = new Float64Array(nx * ny * nz);
    for (let k = 0; k < nz; k++) for (let j = 0; j < ny; j++) for (let i = 0; i < nx; i++) data[(k * ny + j) * nx + i] = 10 * i + 100 * j + 1000 * k;
    const f = fieldMapSampler({ shape: [nz, ny, nx], data }, [-0.01, 0, 0], [0.002, 0.002, 0.004]);
    expect(f(-0.01 + 0.0031, 0.0013, 0.001)).toBeCloseTo(10 * 1.55 + 100 * 0.65 + 1000 * 0.25, 9);
    expect(f(-1, -1, -1)).toBeCloseTo(0, 12);
    expect(f(1, 1, 1)).toBeCloseTo(30 + 200 + 1000, 9);
  });

  test("a phantom's b0 fieldMap file is read through the injected reader, relative to the phantom file", () => {
    const dir = mkdtempSync(join(tmpdir(), "isofold-fx-"));
    writeFileSync(join(dir, "map.npy"), encodeNpy({ dtype: "float32", shape: [2, 2], data: [0, 50, 0, 50] }));
    const json = {
      name: "m", shapes: [{ shape: "rectangle", center: ["0 cm", "0 cm"], size: ["2 cm", "2 cm"], tissue: "water-gel" }],
      b0: { fieldMap: { file: "map.npy", origin: ["-1 cm", "-1 cm", "0 cm"], spacing: ["2 cm", "2 cm", "1 cm"] }, expression: "1" },
    };
    const read = (p: string) => { const a = decodeNpy(readFileSync(p), p); return { shape: a.shape, data: a.data as Float32Array }; };
    const ph = parsePhantom(json, join(dir, "p.json"), 3, { readArray: read });
    expect(ph.b0!(0, 0, 0)).toBeCloseTo(26, 6); // midway in x: 25 Hz, plus the expression's 1 Hz
  });

  test("protocol key shim takes a frequency; anything else is a user error at key path shim", () => {
    expect(parseProtocolObject(protocolObject({ shim: "-12.5 Hz" }) as never, "p.json").shim).toBe(-12.5);
    expect(parseProtocolObject(protocolObject({}) as never, "p.json").shim).toBe(0);
    let err: unknown;
    try { parseProtocolObject(protocolObject({ shim: "3 mm" }) as never, "p.json"); } catch (e) { err = e; }
    expect((err as { keyPath?: string }).keyPath).toBe("shim");
  });

  test("the shim offset moves water along read by shim/BW_px (Δx_pix = Δf/BW_pix)", () => {
    const ph = { name: "w", tissues: { w: { pd: 1, t1: "300 ms", t2: "60 ms", t2star: "60 ms", species: "water" } },
      shapes: [{ shape: "rectangle", center: ["0 cm", "0 cm"], size: ["2 cm", "2 cm"], tissue: "w" }] };
    const at = (shim: number) => simulate(ph, protocolObject({ shim: `${shim} Hz`, bandwidth: "200 Hz/px" }), { t2primeIsochromats: 1 });
    const a = at(0), b = at(300);
    const centroid = (m: Float64Array) => { let s = 0, w = 0; for (let i = 0; i < m.length; i++) { s += m[i]! * (i % 32); w += m[i]!; } return s / w; };
    expect(centroid(b.mag) - centroid(a.mag)).toBeCloseTo(1.5, 1); // 300/200 px toward +read
  });
});

describe("a susceptibility sphere distorts the simulated image", () => {
  test("air sphere in gel: the image loses its left–right symmetry along read; without Δχ it keeps it", () => {
    const base = JSON.parse(readFileSync(join(import.meta.dirname, "..", "phantoms", "air-sphere.json"), "utf8"));
    const proto = protocolObject({ fov: { read: "12 cm", phase: "12 cm" }, matrix: { read: 32, phase: 32 }, bandwidth: "100 Hz/px", te: "8 ms" });
    const noB0 = { ...base };
    delete noB0.b0;
    const asym = (m: Float64Array) => {
      // ∑|I(x) − I(−x)| / ∑ I about the read centre (pixel 16), rows through the sphere
      let d = 0, s = 0;
      for (let y = 10; y < 22; y++) for (let x = 1; x < 16; x++) {
        const l = m[y * 32 + 16 - x]!, r = m[y * 32 + 16 + x]!;
        d += Math.abs(l - r); s += l + r;
      }
      return d / s;
    };
    const withChi = simulate(base, proto, { t2primeIsochromats: 1 });
    const without = simulate(noB0, proto, { t2primeIsochromats: 1 });
    expect(asym(without.mag)).toBeLessThan(0.01);
    expect(asym(withChi.mag)).toBeGreaterThan(0.05);
    // the truth df map holds the closed-form equatorial field −(Δχ/3)(a/r)³·γ̄B0 next to the sphere
    expect(Math.min(...withChi.truth.df)).toBeLessThan(-100);
  }, 60_000);

  test("air sphere: gradient echo loses signal next to the sphere (intravoxel dephasing), spin echo refocuses it", () => {
    // Dephasing across a voxel in a field gradient reduces a gradient echo; a 180° pulse reverses static
    // off-resonance (Hahn 1950, Phys. Rev. 80:580). Neither is painted on: both come from the isochromats' Δf.
    const base = JSON.parse(readFileSync(join(import.meta.dirname, "..", "phantoms", "air-sphere.json"), "utf8"));
    const noB0 = { ...base };
    delete noB0.b0;
    const ratio = (seq: string, ph: unknown) => {
      const r = simulate(ph, protocolObject({
        sequence: seq, fov: { read: "12 cm", phase: "12 cm" }, matrix: { read: 32, phase: 32 }, bandwidth: "400 Hz/px",
        te: "20 ms", tr: "200 ms", flip: seq === "se" ? "90 deg" : "30 deg",
        excitation: { shape: "sinc", duration: "2 ms", tbw: 4, steps: 100 }, refocusing: { shape: "sinc", duration: "3 ms", tbw: 4, steps: 100 },
      }), { t2primeIsochromats: 1, sliceCount: 8, sliceExtent: 2 });
      // mean magnitude in a ring 1.6–2.4 cm from the centre over a ring 3.2–4.2 cm (3.75 mm pixels)
      let near = 0, nn = 0, far = 0, nf = 0;
      for (let y = 0; y < 32; y++) for (let x = 0; x < 32; x++) {
        const d = Math.hypot(x - 16, y - 16) * 0.375, m = r.mag[y * 32 + x]!;
        if (d > 1.6 && d < 2.4) { near += m; nn++; }
        if (d > 3.2 && d < 4.2) { far += m; nf++; }
      }
      return near / nn / (far / nf);
    };
    const greChi = ratio("gre", base), greNone = ratio("gre", noB0), seChi = ratio("se", base), seNone = ratio("se", noB0);
    expect(Math.abs(greNone - 1)).toBeLessThan(0.05);
    expect(Math.abs(seNone - 1)).toBeLessThan(0.05);
    expect(greChi).toBeLessThan(0.6);
    expect(seChi).toBeGreaterThan(0.9);
  }, 60_000);
});
