/**
 * The previewer's caches are invisible: after a sequence of edits (most keep
 * the phantom and its sampling, so the worker reuses the parsed phantom, the
 * sampled cells and the isochromats; a matrix and a B0 offset edit change
 * them), the page's k-space is bitwise the k-space of a fresh page opened on
 * the final settings, and of the CLI's `simulate` run on the exported
 * protocol — at preview quality (the CLI told the preview's isochromat
 * options, `--readout direct` and ISOFOLD_CHUNK_ISOCHROMATS=8192, as
 * src/preview/engine.ts states them) and at default quality. The reference is
 * the CLI's own uncached run of the same pipeline. Screenshots:
 * /tmp/isofold-shots/preview-edits-*.png.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { mkdirSync, mkdtempSync, readFileSync, rmSync } from "node:fs";
import { spawnSync, type ChildProcess } from "node:child_process";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import type { BrowserContext, Page } from "playwright-core";
import { launchChromium, startPreviewServer } from "./browser.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");
const SHOTS = "/tmp/isofold-shots";

describe("previewer caches across edits", () => {
  let dir = "";
  let ctx: BrowserContext;
  let server: ChildProcess;
  let base = "";

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "isofold-preview-edits-"));
    mkdirSync(SHOTS, { recursive: true });
    ({ server, base } = await startPreviewServer(CLI));
    ctx = await launchChromium(join(dir, "profile"), { width: 1280, height: 1100 });
  });

  afterAll(async () => {
    await ctx?.close();
    server?.kill("SIGTERM");
    if (dir) rmSync(dir, { recursive: true, force: true });
  });

  async function open(query: string): Promise<Page> {
    const page = await ctx.newPage();
    const errors: string[] = [];
    page.on("pageerror", (e) => errors.push(e.message));
    await page.goto(`${base}?${query}`);
    await page.waitForFunction(() => (window as any).__preview?.previewGen > 0 || (window as any).__preview?.error, null, { timeout: 40_000 });
    expect(errors).toEqual([]);
    expect(await page.evaluate(() => (window as any).__preview.error?.message ?? null)).toBeNull();
    return page;
  }
  /** One edit, waited for until its preview's k-space bytes have come. */
  async function edit(page: Page, selector: string, value: string): Promise<void> {
    const before = await page.evaluate(() => (window as any).__preview.gen as number);
    await page.locator(selector).fill(value);
    await page.locator(selector).press("Tab");
    await page.waitForFunction((g) => (window as any).__preview.previewGen > g, before, { timeout: 30_000 });
    expect(await page.evaluate(() => (window as any).__preview.error?.gen ?? 0)).toBeLessThanOrEqual(before);
  }
  const previewBytes = async (page: Page) => Buffer.from(await page.evaluate(() => Array.from((window as any).__preview.previewKspace as Uint8Array)));
  async function exported(page: Page, name: string): Promise<{ kspace: Buffer; protocol: string }> {
    await page.waitForFunction((g) => (window as any).__preview.refined >= g, await page.evaluate(() => (window as any).__preview.gen as number), { timeout: 40_000 });
    const [dl] = await Promise.all([page.waitForEvent("download"), page.click("#x-kspace")]);
    const kspace = join(dir, `${name}-kspace.npy`);
    await dl.saveAs(kspace);
    const [dl2] = await Promise.all([page.waitForEvent("download"), page.click("#x-protocol")]);
    const protocol = join(dir, `${name}-protocol.json`);
    await dl2.saveAs(protocol);
    return { kspace: readFileSync(kspace), protocol };
  }
  function cli(protocol: string, out: string, args: string[], env: Record<string, string> = {}): Buffer {
    const r = spawnSync(process.execPath, [CLI, "simulate", join(ROOT, "phantoms/two-bottle.json"), "--protocol", protocol, "--workers", "1", "-q", "--out", out, ...args], { encoding: "utf8", env: { ...process.env, ...env } });
    expect(r.stderr.split("\n").filter((l) => l && !l.startsWith("warning:"))).toEqual([]);
    expect(r.status).toBe(0);
    return readFileSync(join(out, "kspace.npy"));
  }

  /** What the first test exported from the edited page, for the second to compare with the CLI. */
  let edited: Buffer | null = null;
  let full: { kspace: Buffer; protocol: string } | null = null;

  it("after edits (cache hits and misses) the page's k-space is bitwise a fresh page's, at preview and default quality", async () => {
    const start = ["matrix.read=32", "matrix.phase=32", "fov.read=12 cm", "fov.phase=12 cm"];
    const page = await open(["protocol=gre-demo-1.5t", "phantom=two-bottle", ...start.map((s) => `set=${encodeURIComponent(s)}`)].join("&"));
    await edit(page, "#c-te", "7");
    await edit(page, "#c-flip", "20");
    await edit(page, "#c-matrix-read", "48");
    await edit(page, "#c-matrix-read", "32");
    await edit(page, "#c-shim", "10");
    await edit(page, "#c-bandwidth", "150");
    await edit(page, "#c-tr", "25");
    const cache = await page.evaluate(() => (window as any).__preview.cache) as Record<string, { hit: number; miss: number }>;
    // TE, flip, bandwidth, TR and the matrix back to 32 reuse what an earlier edit sampled; the first run, the matrix of 48 and the B0 offset do not
    expect(cache["cells"]!.hit).toBeGreaterThanOrEqual(4);
    expect(cache["isochromats"]!.hit).toBeGreaterThanOrEqual(4);
    expect(cache["cells"]!.miss).toBeGreaterThanOrEqual(3);
    expect(cache["phantom"]!.hit).toBeGreaterThanOrEqual(6);
    expect(await page.locator("#status").textContent()).toContain("kept from an earlier edit");
    edited = await previewBytes(page);
    await page.screenshot({ path: join(SHOTS, "preview-edits-after.png"), fullPage: true });
    full = await exported(page, "edited");
    const url = page.url();
    await page.close();

    const fresh = await open(url.slice(url.indexOf("?") + 1));
    const freshPreview = await previewBytes(fresh);
    const freshFull = await exported(fresh, "fresh");
    await fresh.screenshot({ path: join(SHOTS, "preview-edits-fresh.png"), fullPage: true });
    await fresh.close();
    expect(edited.length).toBeGreaterThan(1000);
    expect(Buffer.compare(edited, freshPreview)).toBe(0);
    expect(Buffer.compare(full.kspace, freshFull.kspace)).toBe(0);
  });

  it("the edited page's k-space is bitwise the CLI's on the exported protocol, at preview and default quality", () => {
    if (!edited || !full) throw new Error("the edits test above did not run");
    // the CLI on the exported protocol: preview quality (the page's isochromat options, operator and chunking), then default quality
    const preview = cli(full.protocol, join(dir, "cli-preview"),
      ["--density", "1", "--slice-isochromats", "3", "--slice-extent", "3", "--t2prime-isochromats", "1", "--readout", "direct"],
      { ISOFOLD_CHUNK_ISOCHROMATS: "8192" });
    expect(Buffer.compare(edited, preview)).toBe(0);
    expect(Buffer.compare(full.kspace, cli(full.protocol, join(dir, "cli-full"), []))).toBe(0);
  });
});
