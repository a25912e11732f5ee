/**
 * The engine through the CLI (compiled dist, child processes): 1, 2 and 3
 * workers and three shards merged give identical bytes of kspace.npy; a run
 * stopped by SIGINT leaves no file under a final name; a run over the memory
 * limit is refused before any work. Small chunks (ISOFOLD_CHUNK_ISOCHROMATS)
 * give many chunks on a small case.
 */
import { spawn, spawnSync } from "node:child_process";
import { existsSync, mkdtempSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, describe, expect, test } from "vitest";

const CLI = join(process.cwd(), "dist", "src", "cli", "index.js");
const tmp = mkdtempSync(join(tmpdir(), "isofold-engine-"));
afterAll(() => rmSync(tmp, { recursive: true, force: true }));

const CASE = [
  "simulate", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t",
  "--set", "matrix.read=32", "--set", "matrix.phase=32", "--set", "dummyScans=2",
  "--density", "1", "--slice-isochromats", "3", "-q",
];
const env = { ...process.env, ISOFOLD_CHUNK_ISOCHROMATS: "64" };
/** What stderr must hold after a run with -q: its report's warnings, one "warning:" line each, nothing else. */
const warningLines = (dir: string) =>
  (JSON.parse(readFileSync(join(dir, "report.json"), "utf8")) as { warnings: string[] }).warnings.map((w) => `warning: ${w}\n`).join("");

function cli(args: string[]): { status: number | null; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { env, encoding: "utf8" });
  return { status: r.status, stdout: r.stdout, stderr: r.stderr };
}

/** Several independent runs side by side (small cases: most of their time is start-up); results in the order given. */
function cliAll(runs: string[][]): Promise<{ status: number | null; stdout: string; stderr: string }[]> {
  return Promise.all(runs.map((args) => new Promise<{ status: number | null; stdout: string; stderr: string }>((done) => {
    const child = spawn(process.execPath, [CLI, ...args], { env });
    let stdout = "", stderr = "";
    child.stdout.on("data", (d: Buffer) => (stdout += d.toString()));
    child.stderr.on("data", (d: Buffer) => (stderr += d.toString()));
    child.on("close", (status) => done({ status, stdout, stderr }));
  })));
}

describe("isofold simulate / merge", () => {
  test("1, 2 and 3 workers and 3 shards merged write identical kspace.npy bytes", async () => {
    const outs = [1, 2, 3].map((w) => join(tmp, `w${w}`));
    const runs = await cliAll(outs.map((out, k) => [...CASE, "--workers", String(k + 1), "-o", out]));
    runs.forEach((r, k) => {
      expect(r.stderr).toBe(warningLines(outs[k]!));
      expect(r.status).toBe(0);
    });
    const report = JSON.parse(readFileSync(join(outs[0]!, "report.json"), "utf8")) as { engine: { chunks: number } };
    expect(report.engine.chunks).toBeGreaterThanOrEqual(9); // at least three blocks, so every shard holds some
    const parts = [0, 1, 2].map((i) => join(tmp, `shard${i}`));
    const shards = await cliAll(parts.map((out, i) => [...CASE, "--shard", `${i}/3`, "-o", out]));
    shards.forEach((r, i) => {
      expect(r.status).toBe(0);
      expect(readdirSync(parts[i]!).sort()).toEqual(["partial.json", "partial.npy"]);
    });
    const merged = join(tmp, "merged");
    const m = cli(["merge", parts[2]!, parts[0]!, join(parts[1]!, "partial.json"), "-o", merged]);
    expect(m.stderr).toBe(warningLines(merged));
    expect(m.status).toBe(0);
    const ref = readFileSync(join(outs[0]!, "kspace.npy"));
    for (const d of [...outs.slice(1), merged]) expect(readFileSync(join(d, "kspace.npy")).equals(ref)).toBe(true);
    expect(readFileSync(join(merged, "image.npy")).equals(readFileSync(join(outs[0]!, "image.npy")))).toBe(true);

    // a merge missing a shard is refused with one line and writes nothing
    const bad = join(tmp, "bad");
    const r1 = cli(["merge", parts[0]!, parts[2]!, "-o", bad]);
    expect(r1.status).toBe(2);
    expect(r1.stderr).toMatch(/missing blocks/);
    expect(existsSync(bad)).toBe(false);
  }, 120_000);

  test("a run stopped by SIGINT mid-way exits 130 and leaves no file under a final name", async () => {
    const out = join(tmp, "interrupted");
    const args = [CLI, "simulate", "phantoms/torso-slice.json", "-p", "gre-demo-1.5t", "--set", "matrix.read=64", "--set", "matrix.phase=64",
      "--slice-isochromats", "8", "--workers", "2", "--readout", "direct", "-o", out];
    const child = spawn(process.execPath, args, { env });
    let stderr = "";
    const code = await new Promise<number | null>((resolve) => {
      let sent = false;
      child.stderr.on("data", (b: Buffer) => {
        stderr += b.toString();
        // progress appears once the engine runs (after a second): interrupt then
        if (!sent && /simulating: \d+%/.test(stderr)) {
          sent = true;
          child.kill("SIGINT");
        }
      });
      child.on("exit", (c) => resolve(c));
    });
    expect(stderr).toMatch(/interrupted/);
    expect(code).toBe(130);
    expect(existsSync(out)).toBe(false);
    // nor a staging folder left behind
    expect(readdirSync(tmp).filter((n) => n.startsWith("interrupted"))).toEqual([]);
  }, 120_000);

  test("a run over the memory limit is refused with the estimate and what would fit, writing nothing", () => {
    const out = join(tmp, "toobig");
    const r = cli([...CASE, "--density", "4", "--max-memory", "0.001", "-o", out]);
    expect(r.status).toBe(2);
    expect(r.stderr.trim().split("\n")).toHaveLength(1);
    expect(r.stderr).toMatch(/estimated [\d.]+ (GiB|MiB) .* isochromats/);
    expect(r.stderr).toMatch(/--density|--slice-isochromats/);
    expect(existsSync(out)).toBe(false);
  }, 60_000);

  test("fast operator: 1 and 3 workers and 2 shards merged write identical kspace.npy bytes", async () => {
    // the torso with a T2′ spread: auto would pick fast too; asked for explicitly here
    const FAST = [
      "simulate", "phantoms/torso-slice.json", "-p", "gre-t1-3t", "--set", "matrix.read=32", "--set", "matrix.phase=32",
      "--density", "2", "--slice-isochromats", "4", "--t2prime-isochromats", "4", "--readout", "fast", "-q",
    ];
    const outs = [1, 3].map((w) => join(tmp, `fast-w${w}`));
    const parts = [0, 1].map((i) => join(tmp, `fast-shard${i}`));
    const runs = await cliAll([
      ...outs.map((out, k) => [...FAST, "--workers", String(k === 0 ? 1 : 3), "-o", out]),
      ...parts.map((out, i) => [...FAST, "--shard", `${i}/2`, "-o", out]),
    ]);
    for (const r of runs) expect(r.status, r.stderr).toBe(0);
    // each shard computed the whole fast k-space and says what would split the run (printed under -q too, as warnings are)
    for (const r of runs.slice(2)) expect(r.stderr).toMatch(/note: this shard computed the whole k-space .*--readout direct/);
    for (const out of outs) {
      const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8")) as { engine: { readout: { operator: string; estimate: { relL2: number } } } };
      expect(rep.engine.readout.operator).toBe("fast");
      expect(rep.engine.readout.estimate.relL2).toBeLessThanOrEqual(1e-6);
    }
    const merged = join(tmp, "fast-merged");
    expect(cli(["merge", parts[1]!, parts[0]!, "-o", merged]).status).toBe(0);
    const ref = readFileSync(join(outs[0]!, "kspace.npy"));
    for (const d of [...outs.slice(1), merged]) expect(readFileSync(join(d, "kspace.npy")).equals(ref)).toBe(true);
  }, 120_000);

  test("--shard outside 0 ≤ i < N is a user error", () => {
    const r = cli([...CASE, "--shard", "3/3", "-o", join(tmp, "x")]);
    expect(r.status).not.toBe(0);
    expect(r.stderr).toMatch(/--shard must be i\/N/);
  }, 60_000);
});
