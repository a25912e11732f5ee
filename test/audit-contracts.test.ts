/**
 * A fresh-eyes audit of the dataset and raw-data contracts, on cases of its
 * own (geometries, coil arrays and noise settings the other dataset tests do
 * not use). Each check is against something outside the code under test:
 * where a small sphere of a phantom is (its centre is written here), the
 * simulated coil images themselves (sensitivity = coil image / uniform-coil
 * image at a voxel holding only a small sphere), direct-sum DFTs, the
 * standard's patient frame (ISMRMRD: x left, y posterior, z superior; S. J.
 * Inati et al., Magn. Reson. Med. 77 (2017) 411), and the SNR laws
 * SNR ∝ voxel volume · √(total sampling time) (W. A. Edelstein et al., Magn.
 * Reson. Med. 3 (1986) 604) and SNR ∝ B0 (D. I. Hoult, R. E. Richards,
 * J. Magn. Reson. 24 (1976) 71).
 */
import { beforeAll, describe, expect, it } from "vitest";
import { readdirSync, readFileSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import h5wasm from "h5wasm/node";
import { readRawH5 } from "./raw-h5.js";
import { datasetInProcess, tempDir, userErrorOf, writeJson } from "./helpers.js";
import { idft, npy } from "./npy-oracle.js";
import { planDataset, type DatasetCliOptions } from "../src/cli/dataset.js";
import { mergeDatasetParts } from "../src/io/dataset-folder.js";
import { makeMask, checkMaskOptions, type MaskOptions } from "../src/dataset/masks.js";
import { Rng } from "../src/dataset/prng.js";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const tmp = tempDir("isofold-audit-");
const FAST = ["--t2prime-isochromats", "1", "--workers", "1", "-q"];

beforeAll(async () => {
  await h5wasm.ready;
});

type V3 = [number, number, number];
interface Raw { xml: string; heads: Record<string, unknown>[]; data: Float32Array[] }

/** raw.h5 read with h5wasm: the header members by name, and each record's interleaved samples. */
function readRaw(file: string): Raw {
  const { xml, names, rows } = readRawH5(file);
  return { xml, heads: rows.map((r) => Object.fromEntries(names.map((n, i) => [n, r[0][i]]))), data: rows.map((r) => r[2]) };
}
const vec = (v: unknown): V3 => Array.from(v as ArrayLike<number>, Number) as V3;
/** ISMRMRD patient frame (LPS) → RAS+, mm. */
const ras = (v: V3): V3 => [-v[0], -v[1], v[2]];

/** NIfTI-1 sform rows (srow_x, srow_y, srow_z at byte 280). */
function niftiAffine(file: string): number[][] {
  const b = readFileSync(file);
  return [0, 1, 2].map((r) => [0, 1, 2, 3].map((c) => b.readFloatLE(280 + 16 * r + 4 * c)));
}

function sphere(name: string, centre: string[], radius: string): string {
  return writeJson(tmp, `${name}.json`, { name, shapes: [{ shape: "sphere", center: centre, radius, tissue: "water-gel" }] });
}

describe("3D slab geometry (gre3d, 8 slice-encoding steps, phase along x)", () => {
  // a 1.8 mm sphere at (0, 0, 8 mm): the centre of step 5 of 8 steps of 4 mm tiling the slab around 2 mm
  // (2 + (5 − 3.5)·4 = 8), and of the in-plane pixel (8, 8) of 16 over 8 cm
  const out = join(tmp, "slab");
  const P = 8, dz = 4, N = 16;
  beforeAll(async () => {
    const proto = writeJson(tmp, "slab-protocol.json", {
      extend: "gre3d-t1-1.5t", fov: { read: "8 cm", phase: "8 cm" }, matrix: { read: N, phase: N, slice: P },
      slice: { thickness: `${dz} mm`, position: "2 mm", orientation: "axial" }, phaseDirection: "x", oversampling: { read: 2, phase: 0 },
    });
    await datasetInProcess([sphere("dot", ["0 cm", "0 cm", "8 mm"], "1.8 mm"), "-p", proto, "--coils", "4", "--coil-rows", "2", "--array-radius", "3 cm",
      "--density", "4", "--slice-isochromats", "8", ...FAST, "-o", out]);
  });

  const peak = () => {
    const t = npy(join(out, "case-0000", "truth.npy"));
    let best = 0, at = 0;
    for (let i = 0; i < P * N * N; i++) {
      const m = Math.hypot(t.data[2 * i]!, t.data[2 * i + 1]!);
      if (m > best) { best = m; at = i; }
    }
    return { p: Math.floor(at / (N * N)), y: Math.floor(at / N) % N, x: at % N, t };
  };

  it("truth.nii's affine and raw.h5's position and directions put the sphere's voxel at the sphere's centre", () => {
    const { p, y, x } = peak();
    const A = niftiAffine(join(out, "case-0000", "truth.nii"));
    const at = A.map((r) => r[0]! * x + r[1]! * y + r[2]! * p + r[3]!);
    at.forEach((v, k) => expect(v, `truth.nii axis ${k}`).toBeCloseTo([0, 0, 8][k]!, 3));
    const raw = readRaw(join(out, "case-0000", "raw.h5"));
    const h = raw.heads[0]!;
    const pos = vec(h.position), rd = vec(h.read_dir), pd = vec(h.phase_dir), sd = vec(h.slice_dir);
    const dx = 80 / N;
    const lps = [0, 1, 2].map((k) => pos[k]! + (x - N / 2) * dx * rd[k]! + (y - N / 2) * dx * pd[k]! + (p - (P - 1) / 2) * dz * sd[k]!) as V3;
    ras(lps).forEach((v, k) => expect(v, `raw.h5 axis ${k}`).toBeCloseTo([0, 0, 8][k]!, 3));
  });

  it("sensitivities.npy at that voxel is the coil image over the uniform-coil image there (the coils' own simulation), within 2 %", () => {
    const { p, y, x, t } = peak();
    const k = npy(join(out, "case-0000", "kspace.npy"));
    const S = npy(join(out, "case-0000", "sensitivities.npy"));
    const n = P * N * N, c0 = N / 2, pc = P / 2;
    const t0 = [t.data[2 * (p * N * N + y * N + x)]!, t.data[2 * (p * N * N + y * N + x) + 1]!];
    let worst = 0;
    for (let c = 0; c < 4; c++) {
      // centred inverse DFT (1/n) at one voxel, as a direct sum over every k-space point
      let re = 0, im = 0;
      for (let q = 0; q < P; q++) for (let v = 0; v < N; v++) for (let u = 0; u < N; u++) {
        const th = 2 * Math.PI * (((q - pc) * (p - pc)) / P + ((v - c0) * (y - c0)) / N + ((u - c0) * (x - c0)) / N);
        const i = c * n + (q * N + v) * N + u, kr = k.data[2 * i]!, ki = k.data[2 * i + 1]!;
        re += kr * Math.cos(th) - ki * Math.sin(th);
        im += kr * Math.sin(th) + ki * Math.cos(th);
      }
      re /= n; im /= n;
      const d = t0[0]! ** 2 + t0[1]! ** 2;
      const sr = (re * t0[0]! + im * t0[1]!) / d, si = (im * t0[0]! - re * t0[1]!) / d;
      const j = c * n + p * N * N + y * N + x;
      worst = Math.max(worst, Math.hypot(sr - S.data[2 * j]!, si - S.data[2 * j + 1]!) / Math.hypot(sr, si));
    }
    // sampled half a step (2 mm) off along z, as before the fix, this was 8.5 %
    expect(worst).toBeLessThan(0.02);
  });
});

describe("raw.h5 geometry of 2D slices: reconstructed from the records alone, the object lands where it is", () => {
  // one sphere of 1 cm at (20, 10, 4) mm; its section in a plane is a disc centred on the projection of the centre
  const ball = () => sphere("ball", ["2 cm", "1 cm", "4 mm"], "1 cm");
  const cases: [string, Record<string, unknown>, V3][] = [
    ["sagittal, phase along z", { slice: { thickness: "8 mm", position: "20 mm", orientation: "sagittal" }, phaseDirection: "z" }, [20, 10, 4]],
    // axial tilted 25° about read (x): normal n = (0, −sin 25°, cos 25°) through 4·n mm; projection c − ((c − p0)·n)·n
    ["oblique, 25° about read", { slice: { thickness: "8 mm", position: "4 mm", orientation: "axial", angle: "25 deg", tiltAxis: "read" }, phaseDirection: "y" }, (() => {
      const s = Math.sin((25 * Math.PI) / 180), c = Math.cos((25 * Math.PI) / 180), n: V3 = [0, -s, c];
      const p0 = n.map((v) => 4 * v), d = [20, 10, 4].map((v, k) => v - p0[k]!), w = d[0]! * n[0] + d[1]! * n[1] + d[2]! * n[2];
      return [20, 10 - w * n[1], 4 - w * n[2]] as V3;
    })()],
  ];
  it.each(cases)("%s", async (name, geometry, expected) => {
    const out = join(tmp, `geo-${name.split(",")[0]}`);
    const proto = writeJson(tmp, `geo-${name.split(",")[0]}.json`, {
      extend: "gre-demo-1.5t", fov: { read: "10 cm", phase: "10 cm" }, matrix: { read: 24, phase: 24 }, oversampling: { read: 2, phase: 0 }, ...geometry,
    });
    await datasetInProcess([ball(), "-p", proto, "--format", "ismrmrd", "--density", "1", "--slice-isochromats", "4", ...FAST, "-o", out]);
    const raw = readRaw(join(out, "case-0000", "raw.h5"));
    const M = Number(raw.heads[0]!.number_of_samples), fov = /<encodedSpace>.*?<fieldOfView_mm><x>([^<]+)<\/x><y>([^<]+)<\/y>/s.exec(raw.xml)!;
    const dx = Number(fov[1]) / M, dy = Number(fov[2]) / 24;
    // image: centred inverse DFT along read of each record, then along phase (direct sums)
    const img: { re: Float64Array; im: Float64Array }[] = [];
    const rows = new Map<number, { re: Float64Array; im: Float64Array }>();
    raw.heads.forEach((h, i) => {
      const d = raw.data[i]!, re = new Float64Array(M), im = new Float64Array(M);
      for (let s = 0; s < M; s++) { re[s] = d[2 * s]!; im[s] = d[2 * s + 1]!; }
      rows.set((h.idx as number[])[0]!, idft(re, im));
    });
    expect(rows.size).toBe(24);
    for (let x = 0; x < M; x++) {
      const re = new Float64Array(24), im = new Float64Array(24);
      for (let y = 0; y < 24; y++) { re[y] = rows.get(y)!.re[x]!; im[y] = rows.get(y)!.im[x]!; }
      img.push(idft(re, im));
    }
    let max = 0;
    for (const col of img) for (let y = 0; y < 24; y++) max = Math.max(max, Math.hypot(col.re[y]!, col.im[y]!));
    const h = raw.heads[0]!, pos = vec(h.position), rd = vec(h.read_dir), pd = vec(h.phase_dir);
    const sum: V3 = [0, 0, 0];
    let w = 0;
    img.forEach((col, x) => {
      for (let y = 0; y < 24; y++) {
        const m = Math.hypot(col.re[y]!, col.im[y]!);
        if (m < 0.5 * max) continue;
        for (let k = 0; k < 3; k++) sum[k] = sum[k]! + m * (pos[k]! + (x - M / 2) * dx * rd[k]! + (y - 12) * dy * pd[k]!);
        w += m;
      }
    });
    const centroid = ras(sum.map((v) => v / w) as V3);
    centroid.forEach((v, k) => expect(Math.abs(v - expected[k]!), `axis ${k}: ${v} against ${expected[k]}`).toBeLessThan(1));
  });
});

describe("--mask random --exact", () => {
  it("gives exactly round(N/R) lines per slice-encoding step, also when that is every line of an even N", () => {
    let tried = 0;
    for (const N of [8, 15, 16, 32]) for (const accel of [1, 1.01, 1.5, 3]) for (const acs of [0, 2, 4]) for (const partialFourier of [1, 0.75]) for (const P of [1, 3]) {
      const o: MaskOptions = { kind: "random", accel, acs, partialFourier, exact: true };
      try { checkMaskOptions(o, P, N); } catch { continue; }
      tried++;
      const m = makeMask(P, N, o, Rng.stream(7, tried, 2));
      for (let p = 0; p < P; p++) {
        let n = 0;
        for (let y = 0; y < N; y++) n += m.data[p * N + y]!;
        expect([N, accel, acs, partialFourier, p, n]).toEqual([N, accel, acs, partialFourier, p, Math.round(N / accel)]);
      }
    }
    expect(tried).toBeGreaterThan(60);
  });
});

describe("physical noise model: the noise measured in the image follows the laws", () => {
  it("σ of the signal-free pixels against (A_ref/SNR)·(V_ref·√T_ref·B_ref)/(V·√T·B) with A_ref from the reference's own truth", async () => {
    const ref = writeJson(tmp, "noise-ref.json", {
      sequence: "gre", field: "1.5 T", fov: { read: "10 cm", phase: "10 cm" }, matrix: { read: 32, phase: 32 },
      slice: { thickness: "5 mm", position: "0 mm", orientation: "axial" }, phaseDirection: "y", bandwidth: "200 Hz/px",
      te: "6 ms", tr: "30 ms", flip: "30 deg", oversampling: { read: 2, phase: 0 },
    });
    const phantom = sphere("small", ["0 cm", "0 cm", "0 cm"], "1 cm");
    const measure = async (name: string, sets: string[]) => {
      const out = join(tmp, `noise-${name}`);
      await datasetInProcess([phantom, "-p", ref, ...sets.flatMap((s) => ["--set", s]), "--noise-model", "physical", "--snr-reference", ref, "--snr", "20",
        "--format", "npy", "--density", "1", "--slice-isochromats", "4", ...FAST, "-o", out]);
      const k = npy(join(out, "case-0000", "kspace.npy")), t = npy(join(out, "case-0000", "truth.npy"));
      const n = 32 * 32;
      let tmax = 0;
      for (let i = 0; i < n; i++) tmax = Math.max(tmax, Math.hypot(t.data[2 * i]!, t.data[2 * i + 1]!));
      // A as README defines it: mean |truth[0]| over the pixels at or above 10 % of its maximum
      let a = 0, na = 0;
      for (let i = 0; i < n; i++) { const m = Math.hypot(t.data[2 * i]!, t.data[2 * i + 1]!); if (m >= 0.1 * tmax) { a += m; na++; } }
      // image by direct-sum DFTs (rows, then columns); noise power over pixels where truth[0] is below 1e-3 of its maximum
      const rows: { re: Float64Array; im: Float64Array }[] = [];
      for (let y = 0; y < 32; y++) {
        const re = new Float64Array(32), im = new Float64Array(32);
        for (let x = 0; x < 32; x++) { re[x] = k.data[2 * (y * 32 + x)]!; im[x] = k.data[2 * (y * 32 + x) + 1]!; }
        rows.push(idft(re, im));
      }
      let s2 = 0, ns = 0;
      for (let x = 0; x < 32; x++) {
        const re = new Float64Array(32), im = new Float64Array(32);
        for (let y = 0; y < 32; y++) { re[y] = rows[y]!.re[x]!; im[y] = rows[y]!.im[x]!; }
        const col = idft(re, im);
        for (let y = 0; y < 32; y++) {
          if (Math.hypot(t.data[2 * (y * 32 + x)]!, t.data[2 * (y * 32 + x) + 1]!) >= 1e-3 * tmax) continue;
          s2 += col.re[y]! ** 2 + col.im[y]! ** 2;
          ns++;
        }
      }
      expect(ns).toBeGreaterThan(600);
      return { A: a / na, sigma: Math.sqrt(s2 / ns) };
    };
    const r = await measure("ref", []);
    // the reference: SNR 20 → image noise A_ref/20 (±10 %: about 4 standard errors of a σ estimate from > 600 complex pixels)
    expect(r.sigma / (r.A / 20)).toBeGreaterThan(0.9);
    expect(r.sigma / (r.A / 20)).toBeLessThan(1.1);
    // twice the slice (V × 2), 4 averages (T × 4), 4 × the pixel bandwidth (T / 4) and 3 T (B × 2): SNR × 2·√(4/4)·2 = 4
    const v = await measure("variant", ["slice.thickness=10 mm", "averages=4", "bandwidth=800 Hz/px", "field=3 T"]);
    expect(v.sigma / (r.A / 20 / 4)).toBeGreaterThan(0.9);
    expect(v.sigma / (r.A / 20 / 4)).toBeLessThan(1.1);
  });
});

describe("bad inputs: one line that says what works, exit 2, nothing written", () => {
  const base = { protocol: "gre-demo-1.5t", set: ["matrix.read=16", "matrix.phase=16"], out: join(tmp, "never"), coils: "1", coilRows: "1", noiseCorrelation: "0",
    noiseLines: "0", mask: "full", partialFourier: "1", count: "2", vary: [], seed: 1, density: 1, sliceIsochromats: 2, sliceExtent: 3, fatModel: "multi", format: "both", noiseModel: "snr" } as unknown as DatasetCliOptions;
  const phantom = join(root, "phantoms", "two-bottle.json");

  it("option values, in process", () => {
    const cases: [Partial<DatasetCliOptions>, RegExp][] = [
      [{ noiseModel: "physical", snrReference: "gre-demo-1.5t" }, /^--noise-model: .*add --snr X/],
      [{ noiseModel: "physical", snr: "20" }, /^--noise-model: .*add --snr-reference <protocol> \(the protocol whose SNR on this phantom is 20\)/],
      [{ noiseModel: "physical", snr: "20", snrReference: "no-such-protocol" }, /^--snr-reference: no protocol file or preset named "no-such-protocol"; presets: /],
      [{ snr: "-3" }, /^--snr: .*above 0.*e\.g\. 30, got "-3"/],
      [{ mask: "random", accel: "0.5" }, /^--accel: .*at least 1.*got "0\.5"/],
      [{ coils: "0" }, /^--coils: .*from 1 to 256, got "0"/],
      [{ cases: "1:3" }, /^--cases: "1:3" is not a range of cases within --count 2; write A:B with 0 ≤ A < B ≤ 2/],
      // a coil covariance without noise would be recorded in case.json but shape nothing
      [{ coils: "2", noiseCorrelation: "0.2" }, /^--noise-correlation: .*without --snr the k-space is noise-free; add --snr X/],
      [{ coils: "2", noiseCovariance: join(tmp, "no-such-cov.npy"), snr: "10" }, /^--noise-covariance: cannot read .*no-such-cov\.npy: no such file; give the coil noise covariance as \.npy/],
      [{ coils: "2", noiseCovariance: writeJson(tmp, "indefinite.json", [[1, 2], [2, 1]]), snr: "10" }, /^--noise-covariance: the noise covariance is not positive definite .*give a Hermitian positive-definite matrix/],
    ];
    for (const [o, pattern] of cases) {
      const e = userErrorOf(() => planDataset(phantom, { ...base, ...o }));
      expect(e.message).toMatch(pattern);
      expect(e.message).not.toContain("\n");
    }
  });

  it("a missing phantom file, and a merge with a gap of one case (nothing written)", async () => {
    // in process: the command line prints the UserError as one line with exit 2 (dataset-cli and dataset-parts tests spawn it)
    const missing = userErrorOf(() => planDataset(join(tmp, "nope.json"), base));
    expect(missing.message).toMatch(/cannot read the phantom file: no such file; give the path of a phantom file \(JSON\), e\.g\. .*two-bottle\.json$/);
    const parts = join(tmp, "parts");
    const common = [phantom, "-p", "gre-demo-1.5t", "--set", "matrix.read=8", "--set", "matrix.phase=8", "--count", "3", "--density", "1", "--slice-isochromats", "2", ...FAST, "-o", parts];
    await datasetInProcess([...common, "--cases", "0:1"]);
    await datasetInProcess([...common, "--cases", "2:3"]);
    const before = readdirSync(parts).sort();
    const gap = userErrorOf(() => mergeDatasetParts(parts));
    expect(gap.message).toMatch(/^dataset-merge: case 1 is missing: no part covers it; run isofold dataset … --cases 1:2$/);
    expect(readdirSync(parts).sort()).toEqual(before);
  });
});
