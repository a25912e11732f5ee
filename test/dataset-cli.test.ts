/**
 * End-to-end checks of `isofold dataset` through the compiled CLI (dist/, built by `npm test`).
 */
import { afterAll, describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync, truncateSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import npyjs from "npyjs";
import { Command } from "commander";
import { registerDataset } from "../src/cli/dataset.js";
import * as nifti from "nifti-reader-js";
import { datasetInProcess } from "./helpers.js";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const CLI = join(root, "dist", "src", "cli", "index.js");
const tmp = mkdtempSync(join(tmpdir(), "isofold-dataset-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));

const BASE = [
  join(root, "phantoms", "two-bottle.json"), "-p", "gre-demo-1.5t",
  "--set", "matrix.read=32", "--set", "matrix.phase=32", "--set", "fov.read=12 cm", "--set", "fov.phase=12 cm",
  "--slice-isochromats", "4", "-q",
];

function run(args: string[]): { status: number | null; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, "dataset", ...BASE, ...args], { encoding: "utf8" });
  return { status: r.status, stdout: r.stdout, stderr: r.stderr };
}

/** The same command in this process (no start-up cost); throws what the command throws. */
const runHere = (args: string[]): Promise<void> => datasetInProcess([...BASE, ...args]);

function npy(file: string): { dtype: string; shape: number[]; data: ArrayLike<number> } {
  const b = readFileSync(file);
  const ab = b.buffer.slice(b.byteOffset, b.byteOffset + b.byteLength);
  const p = new npyjs().parse(ab);
  return { dtype: p.dtype, shape: p.shape, data: p.data as unknown as ArrayLike<number> };
}

/** Centred inverse DFT along one axis, written out directly from the convention in case.json (no FFT library). */
function idftAxis(re: Float64Array, im: Float64Array, n: number, stride: number, count: number, step: number): void {
  const c = Math.floor(n / 2);
  const tr = new Float64Array(n), ti = new Float64Array(n);
  for (let b = 0; b < count; b++) {
    const o = b * step;
    for (let x = 0; x < n; x++) {
      let sr = 0, si = 0;
      for (let m = 0; m < n; m++) {
        const th = (2 * Math.PI * (m - c) * (x - c)) / n;
        const vr = re[o + m * stride]!, vi = im[o + m * stride]!;
        sr += vr * Math.cos(th) - vi * Math.sin(th);
        si += vr * Math.sin(th) + vi * Math.cos(th);
      }
      tr[x] = sr / n;
      ti[x] = si / n;
    }
    for (let x = 0; x < n; x++) {
      re[o + x * stride] = tr[x]!;
      im[o + x * stride] = ti[x]!;
    }
  }
}

function complexOf(a: { data: ArrayLike<number> }, from: number, n: number): { re: Float64Array; im: Float64Array } {
  const re = new Float64Array(n), im = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    re[i] = a.data[2 * (from + i)]!;
    im[i] = a.data[2 * (from + i) + 1]!;
  }
  return { re, im };
}

function relDiff(a: { re: Float64Array; im: Float64Array }, b: { re: Float64Array; im: Float64Array }): number {
  let d = 0, s = 0;
  for (let i = 0; i < a.re.length; i++) {
    d += (a.re[i]! - b.re[i]!) ** 2 + (a.im[i]! - b.im[i]!) ** 2;
    s += b.re[i]! ** 2 + b.im[i]! ** 2;
  }
  return Math.sqrt(d / s);
}

function filesOf(dir: string): Map<string, Buffer> {
  const m = new Map<string, Buffer>();
  for (const c of readdirSync(dir)) {
    const p = join(dir, c);
    if (c.endsWith(".jsonl")) m.set(c, readFileSync(p));
    else for (const f of readdirSync(p)) m.set(`${c}/${f}`, readFileSync(join(p, f)));
  }
  return m;
}

describe("isofold dataset", () => {
  it("fully sampled noise-free 4-coil k-space, combined with the saved sensitivities (SENSE, R = 1), equals truth[1] within 1e-5", async () => {
    const out = join(tmp, "sense");
    await runHere(["--coils", "4", "--array-radius", "15 cm", "-o", out]);
    const k = npy(join(out, "case-0000", "kspace.npy"));
    const S = npy(join(out, "case-0000", "sensitivities.npy"));
    const T = npy(join(out, "case-0000", "truth.npy"));
    expect(k.shape).toEqual([4, 1, 32, 32]);
    const n = 32 * 32;
    // ρ = Σ conj(S_c)·I_c / Σ |S_c|²: SENSE at R = 1 with identity noise covariance (Pruessmann et al., MRM 42 (1999) 952)
    const num = { re: new Float64Array(n), im: new Float64Array(n) }, den = new Float64Array(n);
    for (let c = 0; c < 4; c++) {
      const I = complexOf(k, c * n, n);
      idftAxis(I.re, I.im, 32, 1, 32, 32); // read
      idftAxis(I.re, I.im, 32, 32, 32, 1); // phase
      const s = complexOf(S, c * n, n);
      for (let i = 0; i < n; i++) {
        num.re[i]! += s.re[i]! * I.re[i]! + s.im[i]! * I.im[i]!;
        num.im[i]! += s.re[i]! * I.im[i]! - s.im[i]! * I.re[i]!;
        den[i]! += s.re[i]! ** 2 + s.im[i]! ** 2;
      }
    }
    for (let i = 0; i < n; i++) {
      num.re[i]! /= den[i]!;
      num.im[i]! /= den[i]!;
    }
    const truth1 = complexOf(T, n, n), truth0 = complexOf(T, 0, n);
    expect(relDiff(num, truth1)).toBeLessThan(1e-5);
    // physics: the coil signals were simulated per isochromat, so the combination differs from the uniform-coil image
    // only by the sensitivity variation inside a 3.75 mm voxel and through the slice (small for a 15 cm array)
    const d = relDiff(truth1, truth0);
    expect(d).toBeLessThan(0.05);
    expect(d).toBeGreaterThan(0);
  }, 60_000);

  const A = join(tmp, "a"), B = join(tmp, "b"), Cdir = join(tmp, "c");
  const batch = ["--coils", "4", "--noise-correlation", "0.2", "--snr", "30", "--noise-lines", "64", "--mask", "random", "--accel", "2", "--acs", "6",
    "--count", "2", "--vary", 'position=3mm,rotation=5deg,size=5%,t1=10%,b0=10Hz'];

  it("every file reads back with npyjs and nifti-reader-js with the stated shapes and dtypes; noise.npy has the saved covariance", () => {
    const r = run([...batch, "--seed", "5", "-o", A]);
    expect(r.status).toBe(0);
    const dir = join(A, "case-0001");
    const want: Record<string, [string, number[]]> = {
      "kspace.npy": ["c8", [4, 1, 32, 32]], "sensitivities.npy": ["c8", [4, 1, 32, 32]], "truth.npy": ["c8", [2, 1, 32, 32]],
      "mask.npy": ["u1", [1, 32]], "noise_covariance.npy": ["c8", [4, 4]], "noise.npy": ["c8", [4, 64, 32]],
    };
    for (const [f, [dtype, shape]] of Object.entries(want)) {
      const a = npy(join(dir, f));
      expect([f, a.dtype, a.shape]).toEqual([f, dtype, shape]);
    }
    const nb = readFileSync(join(dir, "truth.nii"));
    const ab = nb.buffer.slice(nb.byteOffset, nb.byteOffset + nb.byteLength);
    expect(nifti.isNIFTI1(ab)).toBe(true);
    const h = nifti.readHeader(ab)!;
    expect(h.dims.slice(0, 4)).toEqual([3, 32, 32, 1]);
    expect(h.datatypeCode).toBe(16); // NIFTI_TYPE_FLOAT32 (nifti1.h)
    const vox = new Float32Array(nifti.readImage(h, ab));
    const T = npy(join(dir, "truth.npy"));
    for (let i = 0; i < 32 * 32; i++) expect(vox[i]).toBeCloseTo(Math.hypot(T.data[2 * i]!, T.data[2 * i + 1]!), 6);
    // sample covariance of the noise-only lines vs noise_covariance.npy (complex Wishart: entry s.e. sqrt(Ψii·Ψjj/m))
    const noise = npy(join(dir, "noise.npy")), cov = npy(join(dir, "noise_covariance.npy"));
    const m = 64 * 32;
    for (let i = 0; i < 4; i++) for (let j = 0; j < 4; j++) {
      let sr = 0, si = 0;
      for (let s = 0; s < m; s++) {
        const ar = noise.data[2 * (i * m + s)]!, ai = noise.data[2 * (i * m + s) + 1]!;
        const br = noise.data[2 * (j * m + s)]!, bi = noise.data[2 * (j * m + s) + 1]!;
        sr += (ar * br + ai * bi) / m;
        si += (ai * br - ar * bi) / m;
      }
      const se = Math.sqrt(cov.data[2 * (i * 4 + i)]! * cov.data[2 * (j * 4 + j)]! / m);
      expect(Math.abs(sr - cov.data[2 * (i * 4 + j)]!)).toBeLessThan(5 * se);
      expect(Math.abs(si - cov.data[2 * (i * 4 + j) + 1]!)).toBeLessThan(5 * se);
    }
    // zeros where not sampled
    const k = npy(join(dir, "kspace.npy")), mask = npy(join(dir, "mask.npy"));
    for (let y = 0; y < 32; y++) {
      let e = 0;
      for (let x = 0; x < 32; x++) e += Math.abs(k.data[2 * (y * 32 + x)]!) + Math.abs(k.data[2 * (y * 32 + x) + 1]!);
      expect(e > 0).toBe(mask.data[y] === 1);
    }
  }, 60_000);

  it("the same seed gives byte-identical files and manifest (two processes); another seed gives different noise", async () => {
    expect(run([...batch, "--seed", "5", "-o", B]).status).toBe(0);
    const a = filesOf(A), b = filesOf(B);
    expect([...b.keys()].sort()).toEqual([...a.keys()].sort());
    for (const [name, bytes] of a) expect([name, Buffer.compare(bytes, b.get(name)!)]).toEqual([name, 0]);
    await runHere([...batch, "--seed", "6", "-o", Cdir]);
    const c = filesOf(Cdir);
    expect(Buffer.compare(c.get("case-0000/noise.npy")!, a.get("case-0000/noise.npy")!)).not.toBe(0);
    expect(Buffer.compare(c.get("case-0000/kspace.npy")!, a.get("case-0000/kspace.npy")!)).not.toBe(0);
  }, 60_000);

  it("an interrupted batch resumes: verified cases are skipped, a damaged case is redone to the same bytes", async () => {
    truncateSync(join(B, "case-0001", "kspace.npy"), 100);
    const manifest = readFileSync(join(B, "manifest.jsonl"), "utf8");
    const lines: string[] = [];
    const log = console.log;
    const program = new Command();
    registerDataset(program);
    console.log = (s: string) => lines.push(s);
    try {
      await program.parseAsync(["dataset", ...BASE, ...batch, "--seed", "5", "-o", B], { from: "user" });
    } finally {
      console.log = log;
    }
    expect(lines.join("\n")).toMatch(/1 case written, 1 verified and skipped/);
    expect(readFileSync(join(B, "manifest.jsonl"), "utf8")).toBe(manifest);
    const a = filesOf(A), b = filesOf(B);
    for (const [name, bytes] of a) expect([name, Buffer.compare(bytes, b.get(name)!)]).toEqual([name, 0]);
  }, 60_000);

  it("bad input through the CLI: one-line error naming the option, exit 2, nothing written", () => {
    const cases: [string[], string][] = [
      [["--mask", "zigzag"], "--mask"],
      [["--coils", "many"], "--coils"],
    ];
    cases.forEach(([args, option], i) => {
      const out = join(tmp, `bad-cli-${i}`);
      const r = run([...args, "-o", out]);
      expect([args.join(" "), r.status]).toEqual([args.join(" "), 2]);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toContain(option);
      expect(r.stderr).not.toMatch(/\n\s+at /);
      expect(existsSync(out)).toBe(false);
    });
  }, 60_000);

  it("bad input: each invalid option is a UserError naming it, before anything is written", async () => {
    const badCov = join(tmp, "bad-cov.json");
    writeFileSync(badCov, "[[1, 2], [2, 1]]");
    const cases: [string[], string][] = [
      [["--mask", "uniform", "--accel", "64"], "--accel"],
      [["--mask", "uniform", "--acs", "40"], "--acs"],
      [["--coils", "8", "--noise-correlation", "0.6"], "--noise-correlation"],
      [["--coils", "2", "--noise-covariance", badCov], "--noise-covariance"],
      [["--coils", "4", "--array-radius", "3 cm"], "--array-radius"],
      [["--vary", "wobble=2"], "--vary"],
      [["--noise-lines", "4"], "--noise-lines"],
    ];
    for (const [args, option] of cases) {
      const out = join(tmp, `bad-${option}`);
      const err = await runHere([...args, "-o", out]).then(() => null, (e: unknown) => e);
      expect([args.join(" "), (err as Error | null)?.name]).toEqual([args.join(" "), "UserError"]);
      expect((err as Error).message.startsWith(option)).toBe(true);
      expect((err as Error).message).not.toContain("\n");
      expect(existsSync(out)).toBe(false);
    }
  }, 60_000);
});
