/**
 * Warnings where a user reads them: `isofold check` prints the phantom's and
 * the protocol's warnings (e.g. library tissue values taken from another
 * field's table) as `warning: …` lines, as `simulate` does, and in --json as
 * `warnings`, not among the notes.
 */
import { describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { resolve } from "node:path";
import { runCheck } from "../src/cli/check.js";
import { tempDir, writeJson } from "./helpers.js";

const CLI = resolve(__dirname, "../dist/src/cli/index.js");
const PHANTOM = resolve(__dirname, "../phantoms/torso-slice.json");
const cli = (...args: string[]) => spawnSync(process.execPath, [CLI, ...args], { encoding: "utf8", timeout: 55_000 });
// the library has 1.5 T and 3 T tables only: at 2 T the 1.5 T values are used, with a warning for each tissue
const AT_2T = /library tissue "muscle": values for 1\.5 T used at 2 T/;

describe("check: phantom and protocol warnings are warnings", () => {
  it("table: a `warning:` line each, none among the notes, nothing twice on stderr", () => {
    const r = cli("check", PHANTOM, "-p", "gre-t1-3t", "--set", "field=2 T");
    expect(r.status, r.stderr).toBe(0);
    const lines = r.stdout.split("\n");
    expect(lines.some((l) => l.startsWith("warning: ") && AT_2T.test(l))).toBe(true);
    expect(lines.some((l) => l.startsWith("note: ") && AT_2T.test(l))).toBe(false);
    expect(r.stderr).toBe("");
    // at the field of a table there is nothing to warn about
    expect(cli("check", PHANTOM, "-p", "gre-t1-3t").stdout).not.toMatch(/^warning: /m);
  });

  it("--json: in `warnings` (and as `warning:` lines on stderr, as simulate prints them), not in `notes`", () => {
    const r = cli("check", PHANTOM, "-p", "gre-t1-3t", "--set", "field=2 T", "--json");
    expect(r.status, r.stderr).toBe(0);
    const j = JSON.parse(r.stdout) as { warnings: string[]; notes: string[] };
    expect(j.warnings.some((w) => AT_2T.test(w))).toBe(true);
    expect(j.notes.some((n) => AT_2T.test(n))).toBe(false);
    expect(r.stderr).toMatch(/^warning: library tissue "muscle"/m);
  });

  it("a protocol warning (an old key name) is a warning of the check too", () => {
    const dir = tempDir();
    const pf = writeJson(dir, "p.json", {
      sequence: "gre3d", field: "1.5 T", fov: { read: "24 cm", phase: "24 cm" }, matrix: { read: 32, phase: 32, partitions: 8 },
      slice: { thickness: "4 mm" }, bandwidth: "250 Hz/px", te: "4 ms", tr: "12 ms", flip: "15 deg",
    });
    const { result } = runCheck(PHANTOM, { protocol: pf, set: [], threshold: [] });
    expect(result.warnings.some((w) => /matrix\.partitions is deprecated/.test(w))).toBe(true);
    expect(result.notes.some((n) => /partitions/.test(n))).toBe(false);
  });
});
