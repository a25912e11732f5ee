/**
 * report.html as a person sees it: Debian's chromium (driven by
 * playwright-core) opens the page from file://, the values shown are compared
 * with report.json, an overlay is switched, and screenshots must not be blank.
 * Screenshots go to the test's temp dir and a copy to /tmp/isofold-shots/.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { copyFileSync, mkdirSync, mkdtempSync, readFileSync, rmSync } from "node:fs";
import { spawnSync } from "node:child_process";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import { pathToFileURL } from "node:url";
import { PNG } from "pngjs";
import type { BrowserContext, Page } from "playwright-core";
import { launchChromium } from "./browser.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");
const SHOTS = "/tmp/isofold-shots";

/** Grey-level variance of a PNG screenshot (0 for a blank one). */
function variance(png: Buffer): number {
  const img = PNG.sync.read(png);
  let s = 0, s2 = 0;
  const n = img.width * img.height;
  for (let i = 0; i < n; i++) {
    const g = (img.data[4 * i]! + img.data[4 * i + 1]! + img.data[4 * i + 2]!) / 3;
    s += g;
    s2 += g * g;
  }
  return s2 / n - (s / n) ** 2;
}

function simulate(out: string, sets: string[]): Record<string, unknown> {
  const r = spawnSync(process.execPath, [CLI, "simulate", join(ROOT, "phantoms/two-bottle.json"), "--protocol", "gre-demo-1.5t",
    "--set", "matrix.read=64", "--set", "matrix.phase=64", ...sets.flatMap((s) => ["--set", s]), "--t2prime-isochromats", "1", "--density", "1", "--workers", "1", "-q", "--out", out],
  { encoding: "utf8" });
  if (r.status !== 0) throw new Error(`simulate failed: ${r.stderr}`);
  return JSON.parse(readFileSync(join(out, "report.json"), "utf8")) as Record<string, unknown>;
}

describe("report.html in a browser", () => {
  let dir = "";
  let ctx: BrowserContext;
  const requests: string[] = [];

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "isofold-report-"));
    ctx = await launchChromium(join(dir, "profile"), { width: 1280, height: 1000 });
    ctx.on("request", (r) => requests.push(r.url()));
    mkdirSync(SHOTS, { recursive: true });
  });

  afterAll(async () => {
    await ctx?.close();
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  async function open(out: string): Promise<Page> {
    const page = await ctx.newPage();
    await page.goto(pathToFileURL(join(out, "report.html")).href);
    return page;
  }

  async function shoot(page: Page, name: string, selector?: string): Promise<Buffer> {
    const path = join(dir, name);
    const buf = selector ? await page.locator(selector).screenshot({ path }) : await page.screenshot({ path, fullPage: true });
    copyFileSync(path, join(SHOTS, name));
    return buf;
  }

  it("sweep.html shows the csv's values, the impossible point and the plots", async () => {
    const out = join(dir, "sweep");
    const r = spawnSync(process.execPath, [CLI, "sweep", join(ROOT, "phantoms/two-bottle.json"), "-p", "gre-demo-1.5t",
      "--set", "matrix.read=32", "--set", "matrix.phase=32", "--vary", "te=5ms..8ms:2", "--vary", "bandwidth=100Hz/px..200Hz/px:2",
      "--t2prime-isochromats", "1", "--density", "1", "--workers", "1", "-q", "-o", out], { encoding: "utf8" });
    expect(r.status).toBe(0);
    const lines = readFileSync(join(out, "sweep.csv"), "utf8").trim().split("\n").map((l) => l.split(","));
    const head = lines[0]!;
    const col = head.indexOf("fatShiftReadPredicted (px)");
    const page = await ctx.newPage();
    await page.goto(pathToFileURL(join(out, "sweep.html")).href);
    for (const row of lines.slice(1)) {
      const tr = page.locator(`#sweep-table tr[data-point="${row[0]}"]`);
      expect(await tr.locator("td").nth(1).innerText()).toBe(row[1]);
      if (row[1] === "done") {
        expect(Number(await tr.locator('td[data-key="fatShiftReadPredicted"]').innerText())).toBeCloseTo(Number(row[col]), 3);
      }
    }
    expect(await page.locator("#impossible li").count()).toBe(lines.slice(1).filter((l) => l[1] === "impossible").length);
    expect(await page.locator("#plots svg.marks").count()).toBeGreaterThanOrEqual(2);
    const shot = await shoot(page, "sweep-page.png");
    expect(variance(shot)).toBeGreaterThan(100);
    expect(variance(await shoot(page, "sweep-montage.png", "#montage img"))).toBeGreaterThan(100);
    await page.close();
    expect(requests.filter((u) => !u.startsWith("file:") && !u.startsWith("data:"))).toEqual([]);
  });

  for (const phase of ["y", "x"] as const) {
    it(`shows report.json's values, orientation letters and switchable overlays (phase along ${phase})`, async () => {
      const out = join(dir, `run-${phase}`);
      const rep = simulate(out, [`phaseDirection=${phase}`]);
      const page = await open(out);

      // the predicted fat shift shown equals report.json's (4 significant digits on the page)
      const fat = rep.fatShift as { predicted: { readout: { px: number } }; measured: { readout: { px: number } | null } };
      const shown = Number(await page.locator('tr[data-key="fatShift.readout.px"] td.predicted').innerText());
      expect(shown).toBeCloseTo(fat.predicted.readout.px, 2);
      expect(Math.abs(shown)).toBeGreaterThan(1); // the demo protocol's low bandwidth: about 2 px
      if (fat.measured.readout) {
        const m = Number(await page.locator('tr[data-key="fatShift.readout.px"] td.measured').innerText());
        expect(m).toBeCloseTo(fat.measured.readout.px, 2);
      }
      const bw = (rep.protocol as { pixelBandwidth: number }).pixelBandwidth;
      expect(Number(await page.locator('tr[data-key="protocol.pixelBandwidth"] td:nth-child(2)').innerText())).toBeCloseTo(bw, 6);

      // radiological axial display whichever way phase runs
      const edge = (e: string) => page.locator(`#fig-image [data-edge="${e}"]`).innerText();
      expect([await edge("left"), await edge("right"), await edge("top"), await edge("bottom")]).toEqual(["R", "L", "A", "P"]);
      const disp = rep.display as { rows: string; cols: string };
      expect(disp.rows).toBe("anterior→posterior");
      expect(disp.cols).toBe("right→left");
      expect(await page.locator('tr[data-key="display.cols"] td:nth-child(2)').innerText()).toBe(disp.cols);

      // the image is enlarged at least 4× and drawn without smoothing
      const img = page.locator("#fig-image img");
      const box = (await img.boundingBox())!;
      expect(box.width).toBeGreaterThanOrEqual(4 * 64);
      expect(await img.evaluate((e) => getComputedStyle(e).imageRendering)).toBe("pixelated");

      // the plots are inline vega SVG with data marks
      expect(await page.locator("#profiles svg.marks").count()).toBe(2);
      expect(await page.locator("#profiles svg.marks path").count()).toBeGreaterThan(0);

      // ROI overlay: on at start, off after the switch, on again
      const roi = page.locator("#ov-image-roi");
      const sw = page.locator('input[data-target="ov-image-roi"]');
      expect(await roi.isVisible()).toBe(true);
      const before = await shoot(page, `report-phase-${phase}-image-overlays-on.png`, "#fig-image .pic");
      await sw.uncheck();
      expect(await roi.evaluate((e) => getComputedStyle(e).display)).toBe("none");
      const fatSw = page.locator('input[data-target="ov-image-fat"]');
      expect(await fatSw.isDisabled()).toBe(false);
      await fatSw.uncheck();
      await page.locator('input[data-target="ov-image-fov"]').uncheck();
      const after = await shoot(page, `report-phase-${phase}-image-overlays-off.png`, "#fig-image .pic");
      expect(Buffer.compare(before, after)).not.toBe(0);
      await sw.check();
      expect(await roi.evaluate((e) => getComputedStyle(e).display)).toBe("inline");
      // the wrap overlay has no data in a simulate report: its switch says so and is disabled
      expect(await page.locator('input[data-target="ov-image-fold"]').isDisabled()).toBe(true);

      const full = await shoot(page, `report-phase-${phase}-page.png`);
      for (const b of [before, after, full]) expect(variance(b)).toBeGreaterThan(100);
      await page.close();

      // nothing but the file itself and inline data was requested
      expect(requests.filter((u) => !u.startsWith("file:") && !u.startsWith("data:"))).toEqual([]);
    });
  }
});
