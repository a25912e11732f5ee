/**
 * Averages as separate raw.h5 records, and the readout operator of a dataset.
 *
 * - A protocol with A averages writes A acquisitions per sampled line with
 *   idx.average = 0 … A−1 and the encoding limit average maximum A−1
 *   (ISMRMRD: S. J. Inati et al., Magn. Reson. Med. 77 (2017) 411–421); the
 *   header still validates against the standard's ismrmrd.xsd (xmllint) and
 *   the standard's C library reads every record (ismrmrd_read_timing_test).
 * - The mean over the averages of a line, centred inverse DFT over read,
 *   cropped as case.json's rawH5.relation states, equals the same transform
 *   of the kspace.npy line (direct DFT sums written here; float32 rounding).
 * - With noise, the averages are independent: the difference of two records
 *   of a line has per-sample variance 2·A·σ²·M/N (variance of a difference of
 *   independent zero-mean Gaussians is the sum of their variances; each
 *   record's noise A·σ² per image-grid sample, M/N per raw sample as
 *   case.json states).
 * - `dataset --readout/--tolerance`: case.json engine.readout records the
 *   operator as simulate's report.json does; bad values are one line, exit 2,
 *   nothing written; the help wording is simulate's.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { npy, idft } from "./npy-oracle.js";
import h5wasm from "h5wasm/node";
import { readRawH5 } from "./raw-h5.js";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const CLI = join(root, "dist", "src", "cli", "index.js");
const XSD = "/usr/share/ismrmrd/schema/ismrmrd.xsd";
const tmp = mkdtempSync(join(tmpdir(), "isofold-averages-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));
beforeAll(async () => {
  await h5wasm.ready;
});

const BASE = [
  join(root, "phantoms", "two-bottle.json"), "-p", "gre-demo-1.5t",
  "--set", "matrix.read=32", "--set", "matrix.phase=32", "--set", "fov.read=12 cm", "--set", "fov.phase=12 cm",
  "--slice-isochromats", "4", "-q", "--coils", "2",
];

function cli(args: string[]) {
  return spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8" });
}
function dataset(out: string, args: string[]): string {
  const r = cli(["dataset", ...BASE, "-o", out, ...args]);
  if (r.status !== 0) throw new Error(`isofold dataset failed: ${r.stderr}`);
  return join(out, "case-0000");
}

interface Rec { line: number; average: number; flags: bigint; data: Float32Array }
function records(file: string): { xml: string; recs: Rec[] } {
  const { xml, names, rows } = readRawH5(file);
  const idx = names.indexOf("idx"), fl = names.indexOf("flags");
  // idx members in ISMRMRD order: kspace_encode_step_1, kspace_encode_step_2, average, …
  return { xml, recs: rows.map((r) => ({ line: (r[0][idx] as number[])[0]!, average: (r[0][idx] as number[])[2]!, flags: BigInt(r[0][fl] as bigint), data: r[2] })) };
}

/** Worst relative L2 (over lines and coils) between the mean of the records of a line and kspace.npy, in image space along read. */
function meanVsKspace(dir: string, A: number, C: number): number {
  const { recs } = records(join(dir, "raw.h5"));
  const k = npy(join(dir, "kspace.npy"));
  let worst = 0;
  for (let y = 0; y < 32; y++) {
    const own = recs.filter((r) => r.line === y);
    expect(own.map((r) => r.average)).toEqual(Array.from({ length: A }, (_, a) => a));
    for (let c = 0; c < C; c++) {
      const rr = new Float64Array(64), ri = new Float64Array(64), kr = new Float64Array(32), ki = new Float64Array(32);
      for (const r of own) {
        for (let s = 0; s < 64; s++) {
          rr[s]! += r.data[2 * (c * 64 + s)]! / A;
          ri[s]! += r.data[2 * (c * 64 + s) + 1]! / A;
        }
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
  return worst;
}

describe("averages as separate raw.h5 records", () => {
  it("noise-free, 3 averages: 3 records per line with idx.average 0…2, limit 2; their mean is kspace.npy; the standard's tools accept the file", () => {
    const dir = dataset(join(tmp, "clean"), ["--set", "averages=3"]);
    const { xml, recs } = records(join(dir, "raw.h5"));
    expect(recs.length).toBe(3 * 32);
    for (let a = 0; a < 3; a++) expect(recs.filter((r) => r.average === a).map((r) => r.line).sort((p, q) => p - q)).toEqual(Array.from({ length: 32 }, (_, y) => y));
    expect(xml).toContain("<average><minimum>0</minimum><maximum>2</maximum><center>0</center></average>");
    // ISMRMRD 1.x flag bits (ismrmrd.h, from memory): first/last in average 5/6, last in measurement 25
    const bit = (r: Rec, b: number) => ((r.flags >> BigInt(b - 1)) & 1n) === 1n;
    for (let a = 0; a < 3; a++) {
      const own = recs.filter((r) => r.average === a);
      expect(own.map((r) => bit(r, 5))).toEqual(own.map((_, i) => i === 0));
      expect(own.map((r) => bit(r, 6))).toEqual(own.map((_, i) => i === own.length - 1));
    }
    expect(recs.map((r) => bit(r, 25))).toEqual(recs.map((_, i) => i === recs.length - 1));
    // float32 storage of both files: relative error ≲ 1e-6
    expect(meanVsKspace(dir, 3, 2)).toBeLessThan(1e-5);
    const x = join(tmp, "header.xml");
    writeFileSync(x, xml);
    const v = spawnSync("xmllint", ["--noout", "--schema", XSD, x], { encoding: "utf8" });
    expect(v.stderr).toContain("validates");
    expect(v.status).toBe(0);
    const t = spawnSync("ismrmrd_read_timing_test", [join(dir, "raw.h5")], { encoding: "utf8" });
    expect(t.status, t.stderr).toBe(0);
    const cj = JSON.parse(readFileSync(join(dir, "case.json"), "utf8"));
    expect(cj.rawH5.averages).toContain("3 records per sampled line");
  });

  it("with noise, 2 averages: the mean is still kspace.npy, and two averages differ by independent noise (variance 2·A·σ²·M/N)", () => {
    const dir = dataset(join(tmp, "noisy"), ["--set", "averages=2", "--snr", "10"]);
    expect(meanVsKspace(dir, 2, 2)).toBeLessThan(1e-5);
    const { recs } = records(join(dir, "raw.h5"));
    const sigma: number = JSON.parse(readFileSync(join(dir, "case.json"), "utf8")).noise.sigma;
    let v = 0, count = 0;
    for (let y = 0; y < 32; y++) {
      const [a, b] = recs.filter((r) => r.line === y);
      for (let i = 0; i < a!.data.length; i += 2) {
        v += (a!.data[i]! - b!.data[i]!) ** 2 + (a!.data[i + 1]! - b!.data[i + 1]!) ** 2;
        count++;
      }
    }
    // 32 lines × 2 coils × 64 samples = 4096 complex differences: standard error of the variance ≈ 1.6 %; ±10 % > 6 standard errors
    const ratio = v / count / (2 * 2 * sigma * sigma * (64 / 32));
    expect(ratio).toBeGreaterThan(0.9);
    expect(ratio).toBeLessThan(1.1);
  });
});

describe("dataset --readout and --tolerance", () => {
  it("case.json engine.readout records the operator asked for and used", () => {
    const dir = dataset(join(tmp, "direct"), ["--readout", "direct", "--tolerance", "1e-4"]);
    const cj = JSON.parse(readFileSync(join(dir, "case.json"), "utf8"));
    expect(cj.engine.readout.operator).toBe("direct");
    expect(cj.engine.readout.requested).toBe("direct");
    expect(cj.engine.readout.tolerance).toBe(1e-4);
    const fast = dataset(join(tmp, "fast"), ["--readout", "fast"]);
    const fj = JSON.parse(readFileSync(join(fast, "case.json"), "utf8"));
    expect(fj.engine.readout.requested).toBe("fast");
    // either the fast operator ran, or the direct one with the reason why
    expect(fj.engine.readout.operator === "fast" || typeof fj.engine.readout.fallback === "string").toBe(true);
  });

  it("bad --readout or --tolerance: one line, exit 2, nothing written; help wording as simulate's", () => {
    for (const args of [["--readout", "quick"], ["--tolerance", "5"], ["--tolerance", "tiny"]]) {
      const out = join(tmp, `bad-${args.join("")}`);
      const r = cli(["dataset", ...BASE, "-o", out, ...args]);
      expect([args.join(" "), r.status]).toEqual([args.join(" "), 2]);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toContain(args[0]);
      expect(existsSync(out)).toBe(false);
    }
    const opt = (help: string, name: string) => help.replace(/\s+/g, " ").split(/(?= --)/).find((l) => l.trim().startsWith(name));
    const d = cli(["dataset", "--help"]).stdout, s = cli(["simulate", "--help"]).stdout;
    for (const name of ["--readout", "--tolerance"]) {
      expect(opt(d, name)).toBeDefined();
      expect(opt(d, name)).toBe(opt(s, name));
    }
  });
});
