/**
 * simulate's report.html carries the closed-form check: its verdict lines, and
 * where folded signal lands as one band per side. The landing rows themselves
 * are checked against simulated images in check.test.ts (Nyquist folding,
 * x' = x − FOV·round(x/FOV), common practice); here: that the page shows them,
 * that the band lies inside the image on the side opposite the one the signal
 * leaves from, and that a run where nothing folds has no band.
 */
import { describe, expect, it } from "vitest";
import { spawnSync } from "node:child_process";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";

const CLI = resolve(__dirname, "../dist/src/cli/index.js");
const TORSO = resolve(__dirname, "../phantoms/torso-slice.json");

function page(phaseFov: string): { html: string; report: Record<string, unknown> } {
  const dir = mkdtempSync(join(tmpdir(), "isofold-folds-"));
  const out = join(dir, "run");
  const r = spawnSync(process.execPath, [CLI, "simulate", TORSO, "-p", "gre-t1-3t", "--set", "matrix.read=32", "--set", "matrix.phase=32",
    "--set", "phaseDirection=x", "--set", `fov.phase=${phaseFov}`, "--density", "1", "--slice-isochromats", "4", "--t2prime-isochromats", "1", "-q", "-o", out], { encoding: "utf8" });
  expect(r.status, r.stderr).toBe(0);
  const html = readFileSync(join(out, "report.html"), "utf8");
  const report = JSON.parse(readFileSync(join(out, "report.json"), "utf8")) as Record<string, unknown>;
  rmSync(dir, { recursive: true, force: true });
  return { html, report };
}

describe("simulate's report.html: check verdicts and fold bands", () => {
  it("a phase FOV narrower than the body: the wrap line says problem and one band per side is drawn; a wide FOV has none", () => {
    const narrow = page("26 cm");
    expect(narrow.html).toMatch(/data-key="wrapPhase" class="verdict-problem"/);
    const fold = /<g class="overlay" id="ov-image-fold"[^>]*>(.*?)<\/g>/s.exec(narrow.html);
    expect(fold, "fold overlay group").not.toBeNull();
    const rects = [...fold![1]!.matchAll(/<rect x="([\d.]+)" y="([\d.]+)" width="([\d.]+)" height="([\d.]+)"/g)].map((m) => m.slice(1).map(Number));
    expect(rects).toHaveLength(2); // the body leaves the FOV on both sides along x
    for (const [x, y, w, h] of rects) {
      expect(x! >= -1e-9 && y! >= -1e-9 && x! + w! <= 32 + 1e-9 && y! + h! <= 32 + 1e-9).toBe(true);
      expect(w! < 32 && h! === 32).toBe(true); // phase along x runs across the display: bands are columns
    }
    expect(fold![1]).toMatch(/folded from \+x/);
    expect(fold![1]).toMatch(/folded from -x/);
    const wide = page("40 cm");
    expect(wide.html).toMatch(/data-key="wrapPhase" class="verdict-fine"/);
    expect(/<g class="overlay" id="ov-image-fold"[^>]*>(.*?)<\/g>/s.exec(wide.html)?.[1] ?? "").not.toMatch(/<rect/);
  });
});
