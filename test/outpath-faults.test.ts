/**
 * The output folder: checked before any work (existing file, path through a
 * file, a place that cannot be written), one run at a time per folder (lock
 * file, stale locks of dead runs taken over), SIGKILL at seeded moments of
 * `simulate` and `dataset` runs (no partly written file under a final name;
 * a re-run completes and gives the same k-space bytes), and a full disk
 * (a small tmpfs: one line, exit 3, no file left).
 */
import { spawn, spawnSync } from "node:child_process";
import { existsSync, mkdirSync, readdirSync, readFileSync, statSync, writeFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { describe, expect, it } from "vitest";
import { checkOutputDir, lockOutputDir } from "../src/io/outpath.js";
import { decodeNpy } from "../src/io/npy.js";
import { Rng } from "../src/dataset/prng.js";
import { tempDir, userErrorOf, writeJson } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");
const FAST = ["--density", "1", "--slice-isochromats", "2", "--t2prime-isochromats", "1", "--workers", "1", "-q"];
const TINY = ["-p", "gre-demo-1.5t", "--set", "matrix.read=8", "--set", "matrix.phase=8", "--set", "dummyScans=0"];

function cli(args: string[]) {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8", timeout: 30_000 });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}
function oneLine(stderr: string): string {
  const lines = stderr.split("\n").filter((l) => l !== "");
  expect(lines, stderr).toHaveLength(1);
  return lines[0]!;
}
/** PID of a process that has ended. */
function deadPid(): number {
  const r = spawnSync(process.execPath, ["-e", "process.stdout.write(String(process.pid))"], { encoding: "utf8" });
  return Number(r.stdout);
}

describe("the output folder is checked before any work", () => {
  it("in-process: an existing file, a path through a file, an unwritable place; new and existing folders pass", () => {
    const dir = tempDir();
    writeFileSync(join(dir, "file"), "x");
    expect(userErrorOf(() => checkOutputDir(join(dir, "file"))).detail).toContain("is an existing file, not a folder");
    expect(userErrorOf(() => checkOutputDir(join(dir, "file", "a", "b"))).detail).toContain("is a file, so no folder can be made below it");
    // /proc takes no new files, for root neither (a place the permission bits do not describe)
    expect(userErrorOf(() => checkOutputDir("/proc/isofold-out/run")).detail).toContain("cannot write into /proc");
    expect(() => checkOutputDir(join(dir, "new", "run"))).not.toThrow();
    mkdirSync(join(dir, "old"));
    expect(() => checkOutputDir(join(dir, "old"))).not.toThrow();
    expect(readdirSync(dir).sort()).toEqual(["file", "old"]);
  });

  it("the CLI: one line, exit 2, before the simulation (simulate, demo, dataset, merge)", () => {
    const dir = tempDir();
    writeFileSync(join(dir, "file"), "x");
    const bad = [join(dir, "file"), join(dir, "file", "sub")];
    const runs: string[][] = [
      ["simulate", "phantoms/two-bottle.json", ...TINY, ...FAST],
      ["demo", ...FAST],
      ["dataset", "phantoms/two-bottle.json", ...TINY, ...FAST],
      ["merge", join(dir, "nothing")],
    ];
    for (const [k, args] of runs.entries()) {
      const r = cli([...args, "-o", bad[k % 2]!]);
      expect(r.code, r.stderr).toBe(2);
      expect(oneLine(r.stderr)).toMatch(/^isofold: error: --out: /);
      expect(r.stdout).toBe("");
    }
    expect(readdirSync(dir)).toEqual(["file"]);
  });
});

describe("one run per output folder: the lock file", () => {
  it("in-process: a held lock refuses a second taker naming the process; released, it can be taken again", () => {
    const dir = tempDir();
    const out = join(dir, "a", "run");
    const lock = lockOutputDir(out);
    expect(readFileSync(`${out}.lock`, "utf8")).toMatch(new RegExp(`^${process.pid}\\n`));
    const e = userErrorOf(() => lockOutputDir(out));
    expect(e.detail).toContain(`another isofold run (process ${process.pid}) is writing to`);
    lock.release();
    expect(existsSync(`${out}.lock`)).toBe(false);
    // nothing was written: the parent folder made for the lock is removed again
    expect(existsSync(join(dir, "a"))).toBe(false);
    lockOutputDir(out).release();
  });

  it("a stale lock (its process is gone) is taken over and the dead run's staging folder removed", () => {
    const dir = tempDir();
    const out = join(dir, "run");
    const pid = deadPid();
    writeFileSync(`${out}.lock`, `${pid}\n`);
    mkdirSync(`${out}.${pid}.tmp`);
    writeFileSync(join(`${out}.${pid}.tmp`, "kspace.npy"), "half");
    const lock = lockOutputDir(out);
    expect(lock.tookOverFrom).toBe(pid);
    expect(existsSync(`${out}.${pid}.tmp`)).toBe(false);
    lock.release();
    expect(readdirSync(dir)).toEqual([]);
  });

  it("the CLI refuses a second run into a folder a live run holds", () => {
    const dir = tempDir();
    const out = join(dir, "run");
    // a live process that is not us holds the lock
    const holder = spawn(process.execPath, ["-e", "setTimeout(() => {}, 20000)"]);
    try {
      writeFileSync(`${out}.lock`, `${holder.pid}\n`);
      const r = cli(["simulate", "phantoms/two-bottle.json", ...TINY, ...FAST, "-o", out]);
      expect(r.code).toBe(2);
      expect(oneLine(r.stderr)).toContain(`another isofold run (process ${holder.pid}) is writing to ${out}`);
      expect(readdirSync(dir)).toEqual(["run.lock"]);
    } finally {
      holder.kill("SIGKILL");
    }
  });
});

/** Every file under a final name in `out` is complete: .npy decodes to its header's size, JSON parses. */
function assertNoPartialFile(out: string): void {
  if (!existsSync(out)) return;
  for (const f of readdirSync(out, { recursive: true }) as string[]) {
    const p = join(out, f);
    if (statSync(p).isDirectory()) {
      expect(f, "a staging folder inside the output").not.toMatch(/\.tmp$/);
      continue;
    }
    expect(f).not.toMatch(/\.tmp$/);
    if (f.endsWith(".npy")) expect(() => decodeNpy(readFileSync(p), p), p).not.toThrow();
    if (f.endsWith(".json")) expect(() => JSON.parse(readFileSync(p, "utf8")), p).not.toThrow();
    if (f.endsWith(".jsonl")) for (const l of readFileSync(p, "utf8").split("\n").filter(Boolean)) JSON.parse(l);
  }
}

/** Starts the CLI and SIGKILLs it after `ms` milliseconds (or lets it finish first). */
function killAfter(args: string[], ms: number): Promise<{ killed: boolean }> {
  return new Promise((res) => {
    const child = spawn(process.execPath, [CLI, ...args], { cwd: ROOT, stdio: "ignore" });
    const t = setTimeout(() => child.kill("SIGKILL"), ms);
    child.on("exit", (_c, sig) => {
      clearTimeout(t);
      res({ killed: sig === "SIGKILL" });
    });
  });
}

describe("SIGKILL at seeded moments", () => {
  // kill times drawn from the project's own seeded generator, spread over a run's length (start-up included)
  const schedule = (seed: number, n: number, maxMs: number) => {
    const rng = Rng.stream(seed, 0, 1);
    return Array.from({ length: n }, () => Math.round(rng.between(50, maxMs)));
  };

  it("simulate: no partly written file under a final name; the re-run completes with the k-space of an uninterrupted run", async () => {
    const dir = tempDir();
    const args = (out: string) => ["simulate", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t", "--set", "matrix.read=16", "--set", "matrix.phase=16",
      "--density", "2", "--slice-isochromats", "4", "--t2prime-isochromats", "2", "--workers", "1", "-q", "-o", out];
    const t0 = Date.now();
    const ref = cli(args(join(dir, "ref")));
    expect(ref.code, ref.stderr).toBe(0);
    const runMs = Date.now() - t0;
    const out = join(dir, "run");
    let killed = 0;
    for (const ms of schedule(5, 4, runMs * 1.1)) {
      if ((await killAfter(args(out), ms)).killed) killed++;
      assertNoPartialFile(out);
    }
    const again = cli(args(out));
    expect(again.code, again.stderr).toBe(0);
    expect(readFileSync(join(out, "kspace.npy")).equals(readFileSync(join(dir, "ref", "kspace.npy")))).toBe(true);
    // the lock and the killed runs' staging folders are gone
    expect(readdirSync(dir).sort()).toEqual(["ref", "run"]);
    console.log(`simulate: ${killed} of 4 runs killed (run ${runMs} ms), re-run complete`);
  });

  it("dataset: killed runs leave complete cases or none; the re-run completes every case", async () => {
    const dir = tempDir();
    const out = join(dir, "ds");
    const args = ["dataset", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t", "--set", "matrix.read=16", "--set", "matrix.phase=16",
      "--count", "3", "--coils", "2", ...FAST, "-o", out];
    const t0 = Date.now();
    let killed = 0;
    for (const ms of schedule(11, 3, 2500)) {
      if ((await killAfter(args, ms)).killed) killed++;
      assertNoPartialFile(out);
    }
    const r = cli(args);
    expect(r.code, r.stderr).toBe(0);
    assertNoPartialFile(out);
    expect(readdirSync(out).sort()).toEqual(["case-0000", "case-0001", "case-0002", "manifest.jsonl"]);
    expect(readFileSync(join(out, "manifest.jsonl"), "utf8").trim().split("\n")).toHaveLength(3);
    expect(readdirSync(dir)).toEqual(["ds"]);
    console.log(`dataset: ${killed} of 3 runs killed, re-run complete in ${((Date.now() - t0) / 1000).toFixed(1)} s total`);
  });
});

describe("a full disk", () => {
  const mnt = join(tempDir(), "small");
  mkdirSync(mnt);
  // mounting needs root (CAP_SYS_ADMIN); elsewhere the test is skipped, and says so
  const m = spawnSync("mount", ["-t", "tmpfs", "-o", "size=96k", "tmpfs", mnt], { encoding: "utf8" });
  const mounted = m.status === 0;
  it.skipIf(!mounted)(`ENOSPC: one line, exit 3, no file left on the device${mounted ? "" : ` (skipped: cannot mount a tmpfs here: ${(m.stderr || m.error?.message || "").trim()})`}`, () => {
    try {
      const r = cli(["simulate", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t", "--set", "matrix.read=64", "--set", "matrix.phase=64", "--set", "dummyScans=0", ...FAST, "-o", join(mnt, "run")]);
      expect(r.code, r.stderr).toBe(3);
      expect(oneLine(r.stderr)).toMatch(/^isofold: error: cannot write the output to .*: no space left on the device \(ENOSPC\)/);
      expect(readdirSync(mnt)).toEqual([]);
    } finally {
      spawnSync("umount", [mnt]);
    }
  });
});
