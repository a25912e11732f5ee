/**
 * `isofold check` and `isofold validate` from the compiled CLI: the table and
 * JSON a user sees, validate's exit status and rows, and bad input (one line
 * on stderr, exit 2, nothing on stdout).
 */
import { describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { join, resolve } from "node:path";
import { mkdtempSync, readdirSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { CASES } from "../src/check/validate.js";
import { DEFAULT_THRESHOLDS } from "../src/check/index.js";

const CLI = resolve(__dirname, "../dist/src/cli/index.js");
const PHANTOM = resolve(__dirname, "../phantoms/torso-slice.json");
const cli = (...args: string[]) => spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8", timeout: 55_000 });

describe("isofold check (CLI)", () => {
  it("prints value, unit, verdict, threshold and reason per line, and says it is not a safety check", () => {
    const r = cli("check", PHANTOM, "-p", "gre-t1-3t", "--set", "phaseDirection=x", "--set", 'fov.phase="26 cm"');
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/wrap along phase: rows hit\s+\d+(\.\d+)? px\s+problem\s+watch > 0 px, problem > 8 px\s+.*no fold with fov\.phase ≥ \d+\.\d cm/);
    expect(r.stdout).toMatch(/fat shift along read\s+1\.74 px\s+watch/); // 434.3 Hz / 250 Hz/px
    expect(r.stdout).toMatch(/not a nerve-stimulation, SAR \(RF heating\) or acoustic-noise check/);
  });

  it("--json: every item has key, value, unit, verdict, stated threshold and reason; --threshold changes a verdict", () => {
    const r = cli("check", PHANTOM, "-p", "epi-1.5t", "--json", "--threshold", "fatShiftPhase=20 px,30 px", "--threshold", "scanTime.watch=1 s");
    expect(r.status, r.stderr).toBe(0);
    const j = JSON.parse(r.stdout) as { items: { key: string; verdict: string; unit: string; reason: string; threshold: { text: string } }[] };
    for (const it of j.items) {
      expect(Object.keys(DEFAULT_THRESHOLDS)).toContain(it.key);
      expect(["fine", "watch", "problem"]).toContain(it.verdict);
      expect(it.threshold.text).toMatch(/^watch [<>] .*, problem [<>] /);
      expect(it.reason.length).toBeGreaterThan(10);
    }
    expect(j.items.find((i) => i.key === "fatShiftPhase")!.verdict).toBe("fine"); // 11.3 px < 20 px
    expect(j.items.find((i) => i.key === "scanTime")!.verdict).toBe("watch"); // 3 s > 1 s
  });

  it("--html writes one self-contained page with every check line (data-key, verdict) and the safety note; a folder that does not exist is refused before any work", () => {
    const dir = mkdtempSync(join(tmpdir(), "isofold-check-html-"));
    const page = join(dir, "check.html");
    const r = cli("check", PHANTOM, "-p", "gre-t1-3t", "--set", "phaseDirection=x", "--set", 'fov.phase="26 cm"', "--html", page, "--json");
    expect(r.status, r.stderr).toBe(0);
    const j = JSON.parse(r.stdout) as { items: { key: string; verdict: string }[] };
    const html = readFileSync(page, "utf8");
    for (const it of j.items) expect(html).toContain(`data-key="${it.key}" class="verdict-${it.verdict}"`);
    expect(html).toMatch(/not a medical device/);
    expect(html).not.toMatch(/(src|href)="(https?:)?\/\//); // nothing fetched
    expect(readdirSync(dir)).toEqual(["check.html"]); // no temporary file left
    const bad = cli("check", PHANTOM, "-p", "gre-t1-3t", "--html", join(dir, "missing", "check.html"));
    expect(bad.status).toBe(2);
    expect(bad.stderr.trim().split("\n")).toHaveLength(1);
    expect(bad.stderr).toMatch(/does not exist/);
    expect(bad.stdout).toBe("");
    rmSync(dir, { recursive: true, force: true });
  });

  const bad: [string, string[], RegExp][] = [
    ["unknown threshold key", ["--threshold", "fatShift=1 px,2 px"], /unknown key "fatShift"; known keys: fatShiftRead/],
    ["threshold without its unit", ["--threshold", "fatShiftRead=1,2"], /has no unit; fatShiftRead is in px/],
    ["problem below watch", ["--threshold", "fatShiftRead=2 px,1 px"], /problem level/],
    ["ROI outside the FOV", ["--roi", '{"shape":"ellipse","center":["40 cm","0 cm"],"semiAxes":["2 cm","2 cm"]}'], /ROI lies outside the FOV/],
    ["ROI that is not JSON", ["--roi", "{shape: ellipse}"], /--roi: not valid JSON/],
    ["ROI of an unknown shape", ["--roi", '{"shape":"blob","center":["0 cm","0 cm"]}'], /--roi: .*"blob" is not allowed/],
  ];
  for (const [name, args, msg] of bad) {
    it(`bad input: ${name} → one line, exit 2`, () => {
      const r = cli("check", PHANTOM, "-p", "gre-t1-3t", ...args);
      expect(r.status).toBe(2);
      expect(r.stdout).toBe("");
      expect(r.stderr.trim().split("\n")).toHaveLength(1);
      expect(r.stderr).toMatch(msg);
    });
  }
});

describe("isofold validate (CLI)", () => {
  it("exits 0 on this build and lists every check with source, expected, measured, tolerance and pass", () => {
    const r = cli("validate", "--json");
    expect(r.status, r.stderr + r.stdout).toBe(0);
    const j = JSON.parse(r.stdout) as { checks: { check: string; source: string; expected: number; measured: number; tolerance: number; pass: boolean }[]; failed: number };
    expect(j.failed).toBe(0);
    expect(j.checks.map((c) => c.check)).toEqual(CASES.map((c) => c.check));
    for (const c of j.checks) {
      expect(c.pass).toBe(true);
      expect(Math.abs(c.measured - c.expected)).toBeLessThanOrEqual(c.tolerance);
      expect(c.source.length).toBeGreaterThan(5);
    }
    for (const name of ["Ernst", "spin echo", "jinc", "fat shift", "wrap", "EPI", "bSSFP"]) {
      expect(j.checks.some((c) => c.check.includes(name)), name).toBe(true);
    }
    const t = cli("validate");
    expect(t.stdout).toMatch(/^result\s+expected\s+measured\s+tolerance\s+unit\s+check \(published source\)/);
    // fits a 100-column terminal (the default when stdout is not a terminal), every check and its source shown
    const lines = t.stdout.split("\n\n")[0]!.split("\n");
    for (const line of lines) expect(line.length, line).toBeLessThanOrEqual(100);
    expect(lines.filter((l) => /^(pass|FAIL) /.test(l))).toHaveLength(CASES.length);
    expect(lines.filter((l) => l.includes("source: "))).toHaveLength(CASES.length);
    expect(t.stdout).toContain(`${CASES.length} of ${CASES.length} checks pass`);
  });
});
