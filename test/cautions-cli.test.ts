/**
 * Cautions a user sees, from the compiled CLI: the safety note in every
 * subcommand's --help and in `protocol` output (table and --json) with the
 * gradient/slew headroom stated as a check against the hardware values
 * entered only; run warnings on stderr as well as in report.json; and the
 * report's per-value source status of library tissues, which must say what
 * the tissue library says (src/phantom/tissues.ts, statuses V/M/E/O).
 */
import { execFile, spawnSync } from "node:child_process";
import { readFileSync } from "node:fs";
import { join, resolve } from "node:path";
import { describe, expect, it } from "vitest";
import { librarySources } from "../src/phantom/index.js";
import { tempDir, writeJson } from "./helpers.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");
/** The words of the safety note every user-facing output must carry (the project's rule, in one line). */
const SAFETY = /not a medical device\. It does not model RF heating \(SAR\), peripheral nerve stimulation or acoustic noise; defer to the scanner's own safety system, local regulations and licensed practice\./;

function cli(args: string[]) {
  const r = spawnSync(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8" });
  return { code: r.status, stdout: r.stdout, stderr: r.stderr };
}
/** The same as cli(), as a promise: independent commands run side by side (each spends most of its time starting up). */
function cliAsync(args: string[]): Promise<{ code: number | null; stdout: string }> {
  return new Promise((done) => {
    execFile(process.execPath, [CLI, ...args], { cwd: ROOT, encoding: "utf8" }, (err, stdout) => {
      done({ code: err ? (typeof err.code === "number" ? err.code : 1) : 0, stdout });
    });
  });
}
/** commander wraps help text at the terminal width: join the lines before matching. */
const unwrap = (s: string) => s.replace(/\s*\n\s*/g, " ");

describe("safety note", () => {
  it("closes the --help of every subcommand, and the top-level help", async () => {
    const top = cli(["--help"]);
    expect(top.code).toBe(0);
    const commands = [...top.stdout.matchAll(/^ {2}([a-z]+)\b/gm)].map((m) => m[1]!).filter((c) => c !== "help");
    // the subcommands the README documents; a new one is checked as soon as it is registered
    for (const c of ["simulate", "demo", "protocol", "dataset", "merge"]) expect(commands).toContain(c);
    expect(unwrap(top.stdout)).toMatch(SAFETY);
    const helps = await Promise.all(commands.map((c) => cliAsync([c, "--help"])));
    commands.forEach((c, k) => {
      expect(helps[k]!.code, c).toBe(0);
      expect(unwrap(helps[k]!.stdout), `isofold ${c} --help`).toMatch(SAFETY);
    });
  }, 60_000);

  it("protocol: the table carries the note and says what the headroom is not; --json has safety and headroom", () => {
    const t = cli(["protocol", "gre-demo-1.5t"]);
    expect(t.code).toBe(0);
    expect(t.stdout).toMatch(SAFETY);
    expect(t.stdout).not.toMatch(/margin/);
    expect(t.stdout).toMatch(/peakGradientRead\s+[\d.]+ mT\/m\s+headroom \d+ % against the gmax entered/);
    expect(t.stdout).toMatch(/headroom .*hardware value entered.*no nerve-stimulation, SAR or acoustic-noise check/);

    const j = cli(["protocol", "gre-demo-1.5t", "--json", "--set", "hardware.gmax=20 mT/m", "--set", "hardware.slew=100 T/m/s"]);
    expect(j.code).toBe(0);
    const o = JSON.parse(j.stdout);
    expect(o.safety).toMatch(SAFETY);
    expect(o.headroom.against).toMatchObject({ gmax: 0.02, slew: 100 });
    expect(o.headroom.note).toMatch(/no nerve-stimulation, SAR or acoustic-noise check/);
    for (const axis of ["read", "phase", "slice"]) {
      const name = axis[0]!.toUpperCase() + axis.slice(1);
      // headroom = 1 − peak demand / value entered, from the derived peaks (SI)
      expect(o.headroom.gradient[axis]).toBeCloseTo(1 - o.derived[`peakGradient${name}`].value / 0.02, 12);
      expect(o.headroom.slew[axis]).toBeCloseTo(1 - o.derived[`peakSlew${name}`].value / 100, 12);
      expect(o.headroom.gradient[axis]).toBeLessThanOrEqual(1);
    }
  }, 60_000);
});

describe("warnings reach the console", () => {
  it("simulate: each warning of report.json is one stderr line prefixed 'warning:', e.g. T2* below T2 not modelled", () => {
    const dir = tempDir();
    const out = join(dir, "run");
    const r = cli(["simulate", "phantoms/two-bottle.json", "-p", "gre-demo-1.5t", "--set", "matrix.read=16", "--set", "matrix.phase=16",
      "--density", "1", "--slice-isochromats", "4", "--t2prime-isochromats", "1", "--t2prime-model", "spread", "--workers", "1", "-q", "-o", out]);
    expect(r.code).toBe(0);
    const report = JSON.parse(readFileSync(join(out, "report.json"), "utf8")) as { warnings: string[] };
    expect(report.warnings.some((w) => /T2\* below T2 is not modelled/.test(w))).toBe(true);
    const lines = r.stderr.trim().split("\n");
    expect(lines).toEqual([...new Set(report.warnings)].map((w) => `warning: ${w}`));
  }, 60_000);

  it("protocol: the deprecation warning of matrix.partitions is printed on stderr and listed in --json", () => {
    const dir = tempDir();
    const p = writeJson(dir, "p.json", { extend: "gre-t1-3t", sequence: "gre3d", matrix: { read: 32, phase: 32, partitions: 8 }, slice: { thickness: "2 mm" } });
    const r = cli(["protocol", p, "--json"]);
    expect(r.code).toBe(0);
    expect(r.stderr).toMatch(/^warning: matrix\.partitions is deprecated.*"slice": 8/);
    expect(r.stderr.trim().split("\n")).toHaveLength(1);
    expect(JSON.parse(r.stdout).warnings).toEqual([r.stderr.trim().replace(/^warning: /, "")]);
  }, 60_000);
});

describe("report.json says where each tissue value comes from, as the library does", () => {
  it("torso at 3 T: library statuses per value; inline tissues say they came from the phantom file", () => {
    const dir = tempDir();
    const out = join(dir, "run");
    const r = cli(["simulate", "phantoms/torso-slice.json", "-p", "gre-t1-3t", "--set", "matrix.read=16", "--set", "matrix.phase=16",
      "--density", "1", "--slice-isochromats", "2", "--t2prime-isochromats", "1", "--workers", "1", "-q", "-o", out]);
    expect(r.code).toBe(0);
    const report = JSON.parse(readFileSync(join(out, "report.json"), "utf8"));
    const list = report.tissues.list as { name: string; t1: number; source: Record<string, string> }[];
    expect(list.map((t) => t.name).sort()).toEqual(["blood", "bone-marrow", "fat", "kidney", "liver", "muscle", "spleen"]);
    for (const t of list) expect(t.source).toEqual(librarySources(t.name, 3));
    const liver = list.find((t) => t.name === "liver")!;
    // de Bazelaire et al. 2004, Radiology 230:652: liver T1 809 ms at 3 T, checked against the paper (V)
    expect(liver.t1).toBeCloseTo(0.809, 9);
    expect(liver.source["t1"]).toMatch(/^checked against the published source: de Bazelaire et al\. 2004/);
    // every proton density is from memory (library header); T2* without a cited value comes from the rule
    for (const t of list) expect(t.source["pd"]).toMatch(/^recalled from memory/);
    expect(liver.source["t2star"]).toMatch(/^estimated by a rule.*R2′ = 14 s⁻¹ at 3 T/);
    expect(list.find((t) => t.name === "bone-marrow")!.source["fatFraction"]).toMatch(/^recalled from memory/);

    const inline = writeJson(dir, "ph.json", {
      name: "inline", tissues: { gel: { pd: 1, t1: "800 ms", t2: "90 ms", t2star: "45 ms", species: "water" } },
      shapes: [{ shape: "ellipse", center: ["0 cm", "0 cm"], semiAxes: ["3 cm", "3 cm"], tissue: "gel" }],
    });
    const r2 = cli(["simulate", inline, "-p", "gre-demo-1.5t", "--set", "matrix.read=16", "--set", "matrix.phase=16",
      "--density", "1", "--slice-isochromats", "2", "--workers", "1", "-q", "-o", join(dir, "run2")]);
    expect(r2.code).toBe(0);
    const rep2 = JSON.parse(readFileSync(join(dir, "run2", "report.json"), "utf8"));
    expect(rep2.tissues.list).toEqual([{ name: "gel", pd: 1, t1: 0.8, t2: 0.09, t2star: 0.045, fatFraction: 0, source: "given in the phantom file" }]);
  }, 60_000);
});

describe("tissue library statuses", () => {
  it("matches the library header: proton densities from memory, 3 T de Bazelaire values checked, T2* by the rule where none is cited", () => {
    expect(librarySources("muscle", 1.5)).toMatchObject({
      pd: expect.stringMatching(/^recalled from memory/),
      t1: expect.stringMatching(/^recalled from memory, source not re-read: de Bazelaire et al\. 2004/),
      t2star: expect.stringMatching(/^estimated by a rule.*R2′ = 7 s⁻¹ at 1\.5 T/),
    });
    expect(librarySources("muscle", 3)!["t1"]).toMatch(/^checked against the published source: de Bazelaire/);
    expect(librarySources("liver", 1.5)!["t2star"]).toMatch(/^checked against the published source: Obrzut et al\. 2020/);
    expect(librarySources("water-gel", 3)!["t1"]).toMatch(/^design value of our own/);
    expect(librarySources("csf", 3)!["t1"]).toBe("recalled from memory, no source cited");
    expect(librarySources("unobtainium", 3)).toBeNull();
  });
});
