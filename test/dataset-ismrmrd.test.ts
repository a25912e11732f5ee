/**
 * raw.h5 against the ISMRMRD standard's own tools (Debian packages
 * ismrmrd-tools, ismrmrd-schema; xmllint from libxml2-utils; .ci/run installs
 * them): the header validates against ismrmrd.xsd, the C library parses the
 * header and reads every acquisition, ismrmrd_recon_cartesian_2d
 * reconstructs a fully sampled noise-free case equal to the root-sum-of-squares
 * of the kspace.npy coil images (its crop of the read oversampling), and the
 * file read back with h5wasm (the HDF5 C library) holds what case.json says.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { copyFileSync, existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { npy, idft } from "./npy-oracle.js";
import h5wasm, { type Dataset, type File as H5File, type Group } from "h5wasm/node";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const CLI = join(root, "dist", "src", "cli", "index.js");
const XSD = "/usr/share/ismrmrd/schema/ismrmrd.xsd";
const tmp = mkdtempSync(join(tmpdir(), "isofold-ismrmrd-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));
beforeAll(async () => {
  await h5wasm.ready;
});

const BASE = [
  join(root, "phantoms", "two-bottle.json"), "-p", "gre-demo-1.5t",
  "--set", "matrix.read=32", "--set", "matrix.phase=32", "--set", "fov.read=12 cm", "--set", "fov.phase=12 cm",
  "--slice-isochromats", "4", "-q",
];

function dataset(out: string, args: string[]): void {
  const r = spawnSync(process.execPath, [CLI, "dataset", ...BASE, "-o", out, ...args], { encoding: "utf8" });
  if (r.status !== 0) throw new Error(`isofold dataset failed: ${r.stderr}`);
}

/** Runs a tool of the standard; a missing tool fails with a message naming the package. */
function tool(cmd: string, args: string[], cwd = tmp): { status: number | null; stdout: string; stderr: string } {
  const r = spawnSync(cmd, args, { encoding: "utf8", cwd });
  if (r.error && (r.error as NodeJS.ErrnoException).code === "ENOENT") {
    throw new Error(`${cmd} is not installed: .ci/run installs it (Debian packages ismrmrd-tools, ismrmrd-schema, libxml2-utils)`);
  }
  return { status: r.status, stdout: r.stdout, stderr: r.stderr };
}

interface Acq {
  head: unknown[];
  data: Float32Array;
}
/** Reads dataset/data as records: head members in ISMRMRD order, data the interleaved samples. */
function readAcqs(file: string): { xml: string; acqs: Acq[]; names: string[]; f: H5File } {
  const f = new h5wasm.File(file, "r");
  const d = f.get("dataset/data") as Dataset;
  const dtype = d.dtype as unknown as [string, [string, unknown][]][];
  const names = dtype[0]![1].map((m) => m[0]);
  const rows = d.value as unknown as [unknown[], Float32Array, Float32Array][];
  const xml = String((f.get("dataset/xml") as Dataset).value as unknown as string[]);
  return { xml, acqs: rows.map((r) => ({ head: r[0], data: r[2] })), names, f };
}

const bit = (flags: unknown, b: number) => ((BigInt(flags as bigint) >> BigInt(b - 1)) & 1n) === 1n;

describe("raw.h5 (ISMRMRD)", () => {
  const full = join(tmp, "full");

  const fullCase = () => {
    if (!existsSync(join(full, "manifest.jsonl"))) dataset(full, ["--coils", "4"]);
  };

  it("header validates against the standard's schema and parses with the C library", () => {
    fullCase();
    const { xml, f } = readAcqs(join(full, "case-0000", "raw.h5"));
    f.close();
    const x = join(tmp, "header.xml");
    writeFileSync(x, xml);
    expect(existsSync(XSD), `${XSD} is missing: .ci/run installs it (Debian package ismrmrd-schema)`).toBe(true);
    const v = tool("xmllint", ["--noout", "--schema", XSD, x]);
    expect(v.stderr).toContain("validates");
    expect(v.status).toBe(0);
    const t = tool("ismrmrd_test_xml", [x]);
    expect(t.status, t.stderr).toBe(0);
    // read oversampling ×2 of the preset: encoded 64 × 32, recon 32 × 32, FOV in mm; 1.5 T → γ̄·B0 (CODATA 2018 γ̄ = 42.577478 MHz/T)
    expect(xml).toMatch(/<encodedSpace><matrixSize><x>64<\/x><y>32<\/y><z>1<\/z><\/matrixSize><fieldOfView_mm><x>240<\/x><y>120<\/y>/);
    expect(xml).toMatch(/<reconSpace><matrixSize><x>32<\/x><y>32<\/y><z>1<\/z><\/matrixSize><fieldOfView_mm><x>120<\/x><y>120<\/y>/);
    expect(xml).toContain(`<H1resonanceFrequency_Hz>${Math.round(42.577478518e6 * 1.5)}</H1resonanceFrequency_Hz>`);
    expect(xml).toContain("<receiverChannels>4</receiverChannels>");
    expect(xml).toContain("<trajectory>cartesian</trajectory>");
    expect(xml).not.toContain("parallelImaging");
  });

  it("the library reads every acquisition, and ismrmrd_recon_cartesian_2d gives the RSS of the kspace.npy coil images within 1e-3 NRMSE", () => {
    fullCase();
    const file = join(full, "case-0000", "raw.h5");
    const r = tool("ismrmrd_read_timing_test", [file]);
    expect(r.status, r.stderr).toBe(0);
    const copy = join(tmp, "recon.h5");
    copyFileSync(file, copy);
    const rec = tool("ismrmrd_recon_cartesian_2d", [copy]);
    expect(rec.status, rec.stderr).toBe(0);
    expect(rec.stdout).toContain("Number of acquisitions      : 32");
    const f = new h5wasm.File(copy, "r");
    const img = f.get("dataset/cpp/data") as Dataset;
    expect(img.shape).toEqual([1, 1, 1, 32, 32]);
    const tool2d = img.value as Float32Array;
    f.close();
    // reference: RSS over coils of the centred inverse DFT (direct sums) of kspace.npy, times M·N_phase = 64·32
    // because the tool's inverse FFT (FFTW backward) is unnormalised
    const k = npy(join(full, "case-0000", "kspace.npy"));
    expect(k.shape).toEqual([4, 1, 32, 32]);
    const n = 32 * 32, rss = new Float64Array(n);
    for (let c = 0; c < 4; c++) {
      // read lines, then phase columns
      const re = new Float64Array(n), im = new Float64Array(n);
      for (let y = 0; y < 32; y++) {
        const lr = new Float64Array(32), li = new Float64Array(32);
        for (let x = 0; x < 32; x++) {
          lr[x] = k.data[2 * (c * n + y * 32 + x)]!;
          li[x] = k.data[2 * (c * n + y * 32 + x) + 1]!;
        }
        const o = idft(lr, li);
        re.set(o.re, y * 32);
        im.set(o.im, y * 32);
      }
      for (let x = 0; x < 32; x++) {
        const cr = new Float64Array(32), ci = new Float64Array(32);
        for (let y = 0; y < 32; y++) {
          cr[y] = re[y * 32 + x]!;
          ci[y] = im[y * 32 + x]!;
        }
        const o = idft(cr, ci);
        for (let y = 0; y < 32; y++) rss[y * 32 + x]! += o.re[y]! ** 2 + o.im[y]! ** 2;
      }
    }
    let d = 0, s = 0;
    for (let i = 0; i < n; i++) {
      const ref = Math.sqrt(rss[i]!) * 64 * 32;
      d += (tool2d[i]! - ref) ** 2;
      s += ref ** 2;
    }
    const nrmse = Math.sqrt(d / s);
    expect(nrmse).toBeLessThan(1e-3);
    expect(s).toBeGreaterThan(0);
  });

  it("undersampled noisy case: noise readouts first, ACS flags, and every line relates to kspace.npy as case.json states", () => {
    const out = join(tmp, "under");
    dataset(out, ["--coils", "4", "--snr", "20", "--noise-lines", "3", "--mask", "uniform", "--accel", "3", "--acs", "8"]);
    const dir = join(out, "case-0000");
    const { acqs, names, xml, f } = readAcqs(join(dir, "raw.h5"));
    f.close();
    const h = (a: Acq, name: string) => a.head[names.indexOf(name)];
    const mask = npy(join(dir, "mask.npy"));
    const sampled = Array.from({ length: 32 }, (_, y) => y).filter((y) => mask.data[y]);
    expect(acqs.length).toBe(3 + sampled.length);
    const cj = JSON.parse(readFileSync(join(dir, "case.json"), "utf8"));
    // noise-only readouts first (flag 19), at the imaging dwell: 1/(pixel bandwidth · read matrix · oversampling)
    const dwellUs = 1e6 / (cj.protocol.pixelBandwidth * 32 * 2);
    for (let i = 0; i < acqs.length; i++) {
      expect(bit(h(acqs[i]!, "flags"), 19)).toBe(i < 3);
      expect(h(acqs[i]!, "sample_time_us") as number).toBeCloseTo(dwellUs, 3);
      expect(h(acqs[i]!, "number_of_samples")).toBe(64);
      expect(h(acqs[i]!, "center_sample")).toBe(32);
      expect(h(acqs[i]!, "active_channels")).toBe(4);
    }
    const img = acqs.slice(3);
    expect(img.map((a) => (h(a, "idx") as number[])[0]!).sort((a, b) => a - b)).toEqual(sampled);
    expect(bit(h(img[img.length - 1]!, "flags"), 25)).toBe(true);
    expect(img.slice(0, -1).some((a) => bit(h(a, "flags"), 25))).toBe(false);
    expect(bit(h(img[0]!, "flags"), 1) && bit(h(img[img.length - 1]!, "flags"), 2)).toBe(true);
    // ACS: lines 12…19 (floor(32/2) − 4 …); lattice (y − 16) mod 3 = 0 → both flags (20, 21); others only 20
    for (const a of img) {
      const y = (h(a, "idx") as number[])[0]!;
      const acs = y >= 12 && y < 20, lattice = (((y - 16) % 3) + 3) % 3 === 0;
      expect(bit(h(a, "flags"), 20)).toBe(acs);
      expect(bit(h(a, "flags"), 21)).toBe(acs && lattice);
    }
    expect(xml).toMatch(/<parallelImaging><accelerationFactor><kspace_encoding_step_1>3<\/kspace_encoding_step_1><kspace_encoding_step_2>1<\/kspace_encoding_step_2><\/accelerationFactor><calibrationMode>embedded<\/calibrationMode>/);
    // axial slice, read along x, phase along y (RAS+) → patient frame LPS: read_dir (−1, 0, 0), phase_dir (0, −1, 0), slice_dir (0, 0, 1)
    const dir3 = (name: string) => Array.from(h(img[0]!, name) as number[], (v) => v + 0);
    expect(dir3("read_dir")).toEqual([-1, 0, 0]);
    expect(dir3("phase_dir")).toEqual([0, -1, 0]);
    expect(dir3("slice_dir")).toEqual([0, 0, 1]);
    // relation: ifftc_64(raw)[x + 16] = ifftc_32(kspace.npy line)[x], float32 storage of both
    const k = npy(join(dir, "kspace.npy"));
    let worst = 0;
    for (const a of img) {
      const y = (h(a, "idx") as number[])[0]!;
      for (let c = 0; c < 4; c++) {
        const rr = new Float64Array(64), ri = new Float64Array(64), kr = new Float64Array(32), ki = new Float64Array(32);
        for (let s = 0; s < 64; s++) {
          rr[s] = a.data[2 * (c * 64 + s)]!;
          ri[s] = a.data[2 * (c * 64 + s) + 1]!;
        }
        for (let x = 0; x < 32; x++) {
          kr[x] = k.data[2 * ((c * 32 + y) * 32 + x)]!;
          ki[x] = k.data[2 * ((c * 32 + y) * 32 + x) + 1]!;
        }
        const hr = idft(rr, ri), hk = idft(kr, ki);
        let d = 0, s = 0;
        for (let x = 0; x < 32; x++) {
          d += (hr.re[x + 16]! - hk.re[x]!) ** 2 + (hr.im[x + 16]! - hk.im[x]!) ** 2;
          s += hk.re[x]! ** 2 + hk.im[x]! ** 2;
        }
        worst = Math.max(worst, Math.sqrt(d / s));
      }
    }
    expect(worst).toBeLessThan(1e-5);
    // noise-only readouts: per raw sample variance σ²·M/N (Ψ = I here), 3·64·4 = 768 samples → ±15 % is > 4 standard errors
    const sigma: number = cj.noise.sigma;
    let v = 0, count = 0;
    for (const a of acqs.slice(0, 3)) for (let i = 0; i < a.data.length; i++) { v += a.data[i]! ** 2; count += 0.5; }
    expect(v / count / (sigma * sigma * 2)).toBeGreaterThan(0.85);
    expect(v / count / (sigma * sigma * 2)).toBeLessThan(1.15);
    expect(cj.files["raw.h5"]).toContain("ISMRMRD");
    expect(cj.rawH5.readSamples).toBe(64);
  });

  it("--format npy writes no raw.h5, --format ismrmrd no kspace.npy", () => {
    const a = join(tmp, "npy"), b = join(tmp, "ismrmrd");
    dataset(a, ["--format", "npy"]);
    dataset(b, ["--format", "ismrmrd"]);
    expect(existsSync(join(a, "case-0000", "raw.h5"))).toBe(false);
    expect(existsSync(join(a, "case-0000", "kspace.npy"))).toBe(true);
    expect(existsSync(join(b, "case-0000", "raw.h5"))).toBe(true);
    expect(existsSync(join(b, "case-0000", "kspace.npy"))).toBe(false);
    expect(readFileSync(join(a, "case-0000", "truth.npy")).equals(readFileSync(join(b, "case-0000", "truth.npy")))).toBe(true);
  });
});
