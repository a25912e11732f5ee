/** report.html from plain data: check lines, escaping, enlargement and scale bar rules. */
import { describe, expect, it } from "vitest";
import { magnification, renderReportHtml, scaleBarMm, type ReportPage } from "../src/report/html.js";
import { encodeGrayPng } from "../src/io/png.js";

function page(extra: Partial<ReportPage> = {}): ReportPage {
  return {
    title: "t <b>", subtitle: "s", safety: "safety line", comparisons: [], tables: [], plots: [], warnings: ["w & <x>"], footer: "f", displayNote: "d",
    images: [{ id: "image", title: "img", png: encodeGrayPng(new Float64Array(64 * 64), 64, 64).png, width: 64, height: 64, pixelMm: { x: 2.5, y: 2.5 },
      letters: { left: "R", right: "L", top: "A", bottom: "P" }, overlays: [], scaleBar: true }],
    ...extra,
  };
}

describe("renderReportHtml", () => {
  it("renders check lines {key,label,value,unit,verdict,threshold,reason} first, with the verdict as a class", () => {
    const html = renderReportHtml(page({ checks: [
      { key: "fatShift.read", label: "fat shift along read", value: 2.17, unit: "px", verdict: "watch", threshold: "watch above 1 px", reason: "low bandwidth" },
    ] }));
    expect(html).toMatch(/<tr data-key="fatShift\.read" class="verdict-watch"><td>fat shift along read<\/td><td class="num">2\.17<\/td><td>px<\/td><td class="verdict">watch<\/td>/);
    expect(html.indexOf('id="checks"')).toBeLessThan(html.indexOf('id="images"'));
    expect(renderReportHtml(page())).not.toContain('id="checks"');
  });

  it("escapes text, inlines the image as a data: URL, and loads nothing from elsewhere", () => {
    const html = renderReportHtml(page());
    expect(html).toContain("t &lt;b&gt;");
    expect(html).toContain("w &amp; &lt;x&gt;");
    expect(html).toContain('src="data:image/png;base64,');
    expect(html).not.toMatch(/(src|href)="(https?:)?\/\//);
    expect(html).toContain("default-src 'none'");
  });

  it("enlarges at least 4× and to at least 512 px; scale bars are 1, 2 or 5 × 10^k mm near a quarter of the width", () => {
    expect(magnification(64, 64)).toBe(8);
    expect(magnification(256, 128)).toBe(4);
    expect(magnification(32, 16)).toBe(16);
    expect(scaleBarMm(160)).toBe(20);
    expect(scaleBarMm(240)).toBe(50);
    expect(scaleBarMm(36)).toBe(5);
    const html = renderReportHtml(page());
    expect(html).toMatch(/class="scalebar" data-mm="20" style="width:64\.0px"/); // 20 mm / 2.5 mm per px × 8
  });
});

describe("report plots on the command line's plot worker", () => {
  it("the plot worker (compiled build) draws the same SVG text as vega on this thread, request after request", async () => {
    const { availableParallelism } = await import("node:os");
    const { lineSpec } = await import("../src/report/plots.js");
    const { renderPlots } = await import("../src/report/run-report.js");
    // the worker script runs compiled (dist/), as the command line runs it
    const built = "../dist/src/cli/plots.js";
    const { plotRenderer } = (await import(built)) as { plotRenderer: (threads: number) => ((specs: Record<string, unknown>[]) => Promise<string[]>) | undefined };
    const render = plotRenderer(2);
    if (availableParallelism() < 2) {
      expect(render).toBeUndefined(); // one core: the command line draws on its own thread
      return;
    }
    expect(render).toBeDefined();
    const specs = (k: number) => [0, 1].map((j) => lineSpec({
      title: `profile ${k}.${j}`, xTitle: "position (mm)", yTitle: "magnitude (a.u.)",
      series: [{ name: "image", points: Array.from({ length: 40 + 7 * k + j }, (_, i) => ({ x: i - 20, y: Math.abs(Math.sin(i / (3 + j))) * (k + 1) })) }],
    }));
    for (const k of [0, 1]) {
      const oracle = await renderPlots(specs(k));
      expect(oracle[0]).toMatch(/^<svg/);
      expect(await render!(specs(k))).toEqual(oracle);
    }
  }, 20_000);
});
