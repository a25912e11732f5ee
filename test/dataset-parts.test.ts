/**
 * Batches split over a scheduler: `isofold dataset --cases A:B` and
 * `isofold dataset-merge`. The oracle is the same batch made in one run:
 * parts must give byte-identical case files, and the merged manifest must be
 * byte-identical to the one-run manifest.
 */
import { afterAll, describe, expect, it } from "vitest";
import { spawn, spawnSync } from "node:child_process";
import { cpSync, existsSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";
import { datasetInProcess } from "./helpers.js";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "..");
const CLI = join(root, "dist", "src", "cli", "index.js");
const tmp = mkdtempSync(join(tmpdir(), "isofold-parts-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));

const BASE = [
  join(root, "phantoms", "two-bottle.json"), "-p", "gre-demo-1.5t",
  "--set", "matrix.read=16", "--set", "matrix.phase=16", "--set", "fov.read=12 cm", "--set", "fov.phase=12 cm",
  "--slice-isochromats", "2", "-q", "--snr", "20", "--count", "3", "--vary", "position=2mm,t1=10%",
];

const here = (args: string[]): Promise<void> => datasetInProcess([...BASE, ...args]);

function cli(args: string[]): { status: number | null; stderr: string; stdout: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8" });
  return { status: r.status, stderr: r.stderr, stdout: r.stdout };
}

function cliAsync(args: string[]): Promise<{ status: number | null; stderr: string }> {
  return new Promise((done) => {
    const p = spawn(process.execPath, [CLI, ...args], { stdio: ["ignore", "ignore", "pipe"] });
    let stderr = "";
    p.stderr.on("data", (b: Buffer) => (stderr += b.toString()));
    p.on("close", (status) => done({ status, stderr }));
  });
}

function tree(dir: string): string[] {
  return readdirSync(dir, { recursive: true }).map(String).sort();
}

describe("dataset parts (--cases) and dataset-merge", () => {
  const whole = join(tmp, "whole"), parts = join(tmp, "parts");

  it("parts 0:1 and 1:3 give the files of the one-run batch byte for byte; the merged manifest equals the one-run manifest", async () => {
    await here(["-o", whole]);
    // the two parts run at the same time into one folder, as array jobs on a shared file system do
    const both = await Promise.all([["1:3"], ["0:1"]].map(([c]) => cliAsync(["dataset", ...BASE, "-o", parts, "--cases", c!])));
    for (const r of both) expect(r.status, r.stderr).toBe(0);
    expect(existsSync(join(parts, "manifest-0-1.jsonl")) && existsSync(join(parts, "manifest-1-3.jsonl"))).toBe(true);
    expect(existsSync(join(parts, "manifest.jsonl"))).toBe(false);
    expect(readdirSync(parts).filter((f) => f.endsWith(".lock"))).toEqual([]);
    for (const c of ["case-0000", "case-0001", "case-0002"]) {
      for (const f of readdirSync(join(whole, c))) {
        expect(readFileSync(join(parts, c, f)).equals(readFileSync(join(whole, c, f))), `${c}/${f}`).toBe(true);
      }
    }
    const r = cli(["dataset-merge", parts]);
    expect(r.status, r.stderr).toBe(0);
    expect(readFileSync(join(parts, "manifest.jsonl"), "utf8")).toBe(readFileSync(join(whole, "manifest.jsonl"), "utf8"));
  }, 60000);

  it("refuses overlaps, gaps, other settings and damaged files with one line and exit 2, writing nothing", async () => {
    const check = (dir: string, pattern: RegExp) => {
      const before = tree(dir);
      const r = cli(["dataset-merge", dir]);
      expect(r.status).toBe(2);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(pattern);
      expect(tree(dir)).toEqual(before);
    };
    // overlap: a third part covering case 0 and 1 again
    const over = join(tmp, "over");
    cpSync(parts, over, { recursive: true });
    rmSync(join(over, "manifest.jsonl"));
    const m01 = readFileSync(join(over, "manifest-0-1.jsonl"), "utf8"), m13 = readFileSync(join(over, "manifest-1-3.jsonl"), "utf8");
    writeFileSync(join(over, "manifest-0-2.jsonl"), m01 + m13.split("\n")[0] + "\n");
    check(over, /overlaps/);
    // gap: case 0 missing
    const gap = join(tmp, "gap");
    cpSync(parts, gap, { recursive: true });
    rmSync(join(gap, "manifest.jsonl"));
    rmSync(join(gap, "manifest-0-1.jsonl"));
    check(gap, /case 0 is missing.*--cases 0:1/);
    // other settings: part 0:1 made with another seed
    const other = join(tmp, "other");
    cpSync(parts, other, { recursive: true });
    rmSync(join(other, "manifest.jsonl"));
    rmSync(join(other, "manifest-0-1.jsonl"));
    rmSync(join(other, "case-0000"), { recursive: true });
    await here(["-o", other, "--cases", "0:1", "--seed", "7"]);
    check(other, /other settings/);
    // damaged file
    const bad = join(tmp, "bad");
    cpSync(parts, bad, { recursive: true });
    rmSync(join(bad, "manifest.jsonl"));
    writeFileSync(join(bad, "case-0002", "mask.npy"), "x");
    check(bad, /checksums/);
  }, 60000);

  it("--cases outside --count: one line, exit 2, nothing written", () => {
    const out = join(tmp, "outside");
    for (const c of ["2:5", "3:3", "a:b"]) {
      const r = cli(["dataset", ...BASE, "-o", out, "--cases", c]);
      expect(r.status).toBe(2);
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(/--cases/);
      expect(existsSync(out)).toBe(false);
    }
  });

  it("the dataset help lists --cases and dataset-merge is in the main help; --shard is not in the dataset help", () => {
    const h = cli(["dataset", "--help"]).stdout;
    expect(h).toContain("--cases");
    expect(h).not.toContain("--shard");
    expect(cli(["--help"]).stdout).toContain("dataset-merge");
  });
});
