/**
 * The previewer in a real browser: `isofold preview` on a free port, Debian's
 * chromium driven by playwright-core. Bandwidth edit against the closed form
 * Δf/BW (fat −3.4 ppm, Hamilton et al. 2011; γ̄ = 42.577478518 MHz/T, CODATA
 * 2018), a phase FOV below the object against the wrap verdict and overlay,
 * a URL with set= overrides, an impossible value, the exported k-space against
 * the CLI's `simulate`, and path traversal refused by the server.
 * Screenshots: /tmp/isofold-shots/preview-*.png.
 */
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { spawnSync, type ChildProcess } from "node:child_process";
import { request } from "node:http";
import { tmpdir } from "node:os";
import { join, resolve } from "node:path";
import type { BrowserContext, Page } from "playwright-core";
import { launchChromium, startPreviewServer } from "./browser.js";
import { PNG } from "pngjs";
import { decodeNpy } from "../src/io/npy.js";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");
const SHOTS = "/tmp/isofold-shots";
const GAMMA_BAR = 42.577478518e6;

function get(port: number, path: string): Promise<{ status: number; body: string }> {
  return new Promise((ok, fail) => {
    const r = request({ host: "127.0.0.1", port, path, method: "GET" }, (res) => {
      let body = "";
      res.on("data", (d) => (body += String(d)));
      res.on("end", () => ok({ status: res.statusCode ?? 0, body }));
    });
    r.on("error", fail);
    r.end();
  });
}

describe("isofold preview in a browser", () => {
  let dir = "";
  let ctx: BrowserContext;
  let server: ChildProcess;
  let base = "";
  let port = 0;

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), "isofold-preview-"));
    mkdirSync(SHOTS, { recursive: true });
    ({ server, base, port } = await startPreviewServer(CLI));
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
    await page.waitForFunction(() => ((window as any).__preview?.painted > 0 && (window as any).__preview?.checked > 0) || (window as any).__preview?.error, null, { timeout: 40_000 });
    expect(errors).toEqual([]);
    expect(await page.evaluate(() => (window as any).__preview.error?.message ?? null)).toBeNull();
    return page;
  }
  async function edit(page: Page, selector: string, value: string): Promise<number> {
    const before = await page.evaluate(() => (window as any).__preview.gen as number);
    await page.locator(selector).fill(value);
    await page.locator(selector).press("Tab");
    await page.waitForFunction((g) => (window as any).__preview.gen > g, before);
    return page.evaluate(() => (window as any).__preview.gen as number);
  }
  const painted = (page: Page, g: number) => page.waitForFunction((n) => (window as any).__preview.painted >= n && (window as any).__preview.checked >= n, g, { timeout: 30_000 });
  const text = async (page: Page, key: string) => (await page.locator(`#views [data-key="${key}"]`).first().textContent()) ?? "";

  it("the server refuses paths outside its own files", async () => {
    for (const p of ["/../package.json", "/%2e%2e/package.json", "/presets/%2e%2e%2f%2e%2e%2fpackage.json", "/phantoms/..%2f..%2fpackage.json", "//etc/passwd", "/%2fetc%2fpasswd", "/C:%5cwindows"]) {
      const r = await get(port, p);
      expect(r.status, p).toBe(400);
      expect(r.body).toMatch(/^refused/);
    }
    expect((await get(port, "/etc/passwd")).status).toBe(404);
    expect((await get(port, "/package.json")).status).toBe(404);
    expect((await get(port, "/presets/gre-t1-3t.json")).status).toBe(200);
  });

  it("a bandwidth edit moves the fat-shift number to Δf/BW; an impossible TE shows the CLI's message and keeps the image", async () => {
    const page = await open("protocol=gre-demo-1.5t&phantom=two-bottle&set=matrix.read%3D64&set=matrix.phase%3D64");
    const g = await edit(page, "#c-bandwidth", "130");
    await painted(page, g);
    const px = Number(await text(page, "fatShift.predicted.readout.px"));
    const expected = (-3.4e-6 * GAMMA_BAR * 1.5) / 130;
    expect(Math.abs(px - expected)).toBeLessThan(1e-4 * Math.abs(expected));
    expect(page.url()).toContain("set=bandwidth%3D130%20Hz%2Fpx");
    await page.screenshot({ path: join(SHOTS, "preview-bandwidth.png"), fullPage: true });
    const g2 = await edit(page, "#c-te", "0.5");
    await page.waitForFunction((n) => (window as any).__preview.error?.gen === n, g2);
    const msg = (await page.locator("#e-te").textContent()) ?? "";
    const cli = spawnSync(process.execPath, [CLI, "protocol", "gre-demo-1.5t", "--set", "matrix.read=64", "--set", "matrix.phase=64", "--set", "bandwidth=130 Hz/px", "--set", "te=0.5 ms"], { encoding: "utf8" });
    expect(cli.status).toBe(2);
    expect(msg.length).toBeGreaterThan(10);
    expect(cli.stderr).toContain(msg.replace(/^.*?: te: /, ""));
    expect(await page.evaluate(() => (window as any).__preview.shown)).toBe(g);
    await page.screenshot({ path: join(SHOTS, "preview-te-refused.png"), fullPage: true });
    await page.close();
  });

  it("a phase FOV below the body: the wrap verdict and the landing overlay appear", async () => {
    const page = await open("protocol=gre-t1-3t&phantom=torso-slice&set=matrix.read%3D64&set=matrix.phase%3D64&set=phaseDirection%3Dx&set=fov.phase%3D40%20cm");
    expect(await page.locator('[data-overlay="fold"]').count()).toBe(0);
    expect(await text(page, "checks.wrapPhase.verdict")).toBe("fine");
    const g = await edit(page, "#c-fov-phase", "26");
    await painted(page, g);
    expect(await text(page, "checks.wrapPhase.verdict")).not.toBe("fine");
    expect(Number((await text(page, "checks.wrapPhase.value")).split(" ")[0])).toBeGreaterThan(0);
    expect(await page.locator('[data-overlay="fold"]').count()).toBeGreaterThan(0);
    await page.locator("#image-box").screenshot({ path: join(SHOTS, "preview-wrap.png") });
    await page.screenshot({ path: join(SHOTS, "preview-wrap-page.png"), fullPage: true });
    await page.close();
  });

  it("a URL with set= overrides reproduces the view", async () => {
    const page = await open("protocol=gre-t1-3t&phantom=torso-slice&set=bandwidth%3D130%20Hz%2Fpx&set=fov.phase%3D20%20cm&set=te%3D8%20ms&set=matrix.read%3D64&set=matrix.phase%3D64");
    expect(await page.locator("#c-bandwidth").inputValue()).toBe("130");
    expect(await page.locator("#c-fov-phase").inputValue()).toBe("20");
    expect(Number(await text(page, "protocol.fov.phase"))).toBeCloseTo(200, 6);
    expect(Number(await text(page, "protocol.pixelBandwidth"))).toBeCloseTo(130, 6);
    expect(await page.locator("#c-protocol").inputValue()).toBe("gre-t1-3t");
    await page.screenshot({ path: join(SHOTS, "preview-url.png"), fullPage: true });
    await page.close();
  });

  it("a phantom file chosen in the page is read by the phantom validators and never sent to the server", async () => {
    const page = await open("protocol=gre-demo-1.5t&phantom=two-bottle&set=matrix.read%3D32&set=matrix.phase%3D32");
    const sent: string[] = [];
    page.on("request", (r) => sent.push(`${r.method()} ${r.url()}`));
    const bad = { name: "bad", shapes: [{ shape: "sphere", center: ["0 cm", "0 cm", "0 cm"], radius: "3", tissue: "water-gel" }] };
    const g0 = await page.evaluate(() => (window as any).__preview.gen as number);
    await page.locator("#c-file").setInputFiles({ name: "bad-phantom.json", mimeType: "application/json", buffer: Buffer.from(JSON.stringify(bad)) });
    await page.waitForFunction((g) => (window as any).__preview.error?.gen > g, g0);
    const msg = (await page.locator("#general-error").textContent()) ?? "";
    const file = join(dir, "bad-phantom.json");
    writeFileSync(file, JSON.stringify(bad));
    const cli = spawnSync(process.execPath, [CLI, "check", file, "-p", "gre-demo-1.5t"], { encoding: "utf8" });
    expect(cli.status).toBe(2);
    expect(msg).toContain("shapes[0].radius");
    expect(cli.stderr).toContain(msg.slice(msg.indexOf("shapes[0].radius")));
    const good = { ...bad, name: "one-sphere", shapes: [{ ...bad.shapes[0], radius: "3 cm" }] };
    const g1 = await page.evaluate(() => (window as any).__preview.gen as number);
    await page.locator("#c-file").setInputFiles({ name: "one-sphere.json", mimeType: "application/json", buffer: Buffer.from(JSON.stringify(good)) });
    await painted(page, g1 + 1);
    expect(await page.locator("#c-phantom").inputValue()).toBe("file:one-sphere.json");
    expect(page.url()).toContain("phantom=file%3Aone-sphere.json");
    expect(sent.filter((r) => !r.startsWith("GET ") || !r.startsWith(`GET ${base}`))).toEqual([]);
    await page.screenshot({ path: join(SHOTS, "preview-dropped.png"), fullPage: true });
    await page.close();
  });

  it("the exported k-space at default quality equals the CLI's simulate", async () => {
    const sets = ["matrix.read=32", "matrix.phase=32", "fov.read=12 cm", "fov.phase=12 cm"];
    const q = ["protocol=gre-demo-1.5t", "phantom=two-bottle", ...sets.map((s) => `set=${encodeURIComponent(s)}`)].join("&");
    const page = await open(q);
    await page.waitForFunction(() => (window as any).__preview.refined > 0, null, { timeout: 40_000 });
    const [dl] = await Promise.all([page.waitForEvent("download"), page.click("#x-kspace")]);
    const file = join(dir, "page-kspace.npy");
    await dl.saveAs(file);
    const [dl2] = await Promise.all([page.waitForEvent("download"), page.click("#x-protocol")]);
    const protoFile = join(dir, "protocol.json");
    await dl2.saveAs(protoFile);
    const [dl3] = await Promise.all([page.waitForEvent("download"), page.click("#x-png")]);
    const pngFile = join(dir, "image.png");
    await dl3.saveAs(pngFile);
    const png = PNG.sync.read(readFileSync(pngFile));
    expect([png.width, png.height]).toEqual([32, 32]);
    expect(readFileSync(pngFile).toString("latin1")).toContain("Simulated image computed by isofold");
    await page.screenshot({ path: join(SHOTS, "preview-export.png"), fullPage: true });
    const operator = await page.evaluate(() => (window as any).__preview.last.readout as string);
    // the page ran the engine on its Web Worker executor (engine/web.ts), not on the worker's own thread
    expect(await page.evaluate(() => (window as any).__preview.executor as string)).toMatch(/^Web Worker executor, \d+ engine workers?/);
    await page.close();
    const out = join(dir, "cli");
    // the exported protocol loads back with --protocol
    const r = spawnSync(process.execPath, [CLI, "simulate", join(ROOT, "phantoms/two-bottle.json"), "--protocol", protoFile, "--workers", "1", "-q", "--out", out], { encoding: "utf8" });
    expect(r.stderr.split("\n").filter((l) => l && !l.startsWith("warning:"))).toEqual([]);
    expect(r.status).toBe(0);
    const a = decodeNpy(readFileSync(file)), b = decodeNpy(readFileSync(join(out, "kspace.npy")));
    expect(a.shape).toEqual(b.shape);
    const da = a.data as { re: Float64Array; im: Float64Array }, db = b.data as { re: Float64Array; im: Float64Array };
    let num = 0, den = 0;
    for (let i = 0; i < da.re.length; i++) {
      num += (da.re[i]! - db.re[i]!) ** 2 + (da.im[i]! - db.im[i]!) ** 2;
      den += db.re[i]! ** 2 + db.im[i]! ** 2;
    }
    expect(den).toBeGreaterThan(0);
    expect(Math.sqrt(num / den)).toBeLessThanOrEqual(1e-6);
    // same operator and kernels: the bytes agree
    const rep = JSON.parse(readFileSync(join(out, "report.json"), "utf8")) as { engine: { readout: { operator: string } } };
    expect(operator).toBe(rep.engine.readout.operator);
    expect(Buffer.compare(readFileSync(file), readFileSync(join(out, "kspace.npy")))).toBe(0);
  });

  it("every number on the page carries a data-key that resolves in the CLI's report.json to the same value", async () => {
    const sets = ["matrix.read=32", "matrix.phase=32", "fov.phase=10 cm", "bandwidth=130 Hz/px"];
    const page = await open(["protocol=gre-demo-1.5t", "phantom=two-bottle", ...sets.map((x) => `set=${encodeURIComponent(x)}`)].join("&"));
    await page.waitForFunction(() => (window as any).__preview.refined > 0 && (window as any).__preview.checked > 0, null, { timeout: 40_000 });
    await page.waitForTimeout(50);
    const shown = await page.evaluate(() => [...document.querySelectorAll<HTMLElement>("[data-key]")].map((e) => ({ key: e.dataset.key!, text: e.textContent ?? "", unit: e.dataset.unit ?? null })));
    const [dl] = await Promise.all([page.waitForEvent("download"), page.click("#x-protocol")]);
    const protoFile = join(dir, "keys-protocol.json");
    await dl.saveAs(protoFile);
    await page.screenshot({ path: join(SHOTS, "preview-data-keys.png"), fullPage: true });
    await page.close();
    const out = join(dir, "keys-cli");
    const r = spawnSync(process.execPath, [CLI, "simulate", join(ROOT, "phantoms/two-bottle.json"), "--protocol", protoFile, "--workers", "1", "-q", "--out", out], { encoding: "utf8" });
    expect(r.status).toBe(0);
    const report = JSON.parse(readFileSync(join(out, "report.json"), "utf8")) as Record<string, unknown>;
    const resolveKey = (key: string): unknown => key.split(".").reduce<unknown>((o, k) => (o !== null && typeof o === "object" ? (o as Record<string, unknown>)[k] : undefined), report);
    // report.json holds SI except where the key names its unit (….px, ….mm) and the check lines (checks.<key>.value in checks.<key>.unit)
    const toSi: Record<string, number> = { "": 1, Hz: 1, "Hz/px": 1, kHz: 1e3, mm: 1e-3, m: 1, px: 1 };
    expect(shown.length).toBeGreaterThan(15);
    expect(shown.some((x) => x.key.startsWith("checks."))).toBe(true);
    for (const { key, text, unit } of shown) {
      const want = resolveKey(key);
      expect(want, `${key} is not in report.json`).not.toBeUndefined();
      if (typeof want === "string") {
        expect(text, key).toBe(want);
        continue;
      }
      expect(typeof want, key).toBe("number");
      const leaf = key.slice(key.lastIndexOf(".") + 1);
      let factor: number;
      if (key.startsWith("checks.") && leaf === "value") {
        expect(unit, key).toBe(resolveKey(key.replace(/value$/, "unit")));
        factor = 1;
      } else if (leaf === "px" || leaf === "mm") {
        expect(unit, key).toBe(leaf);
        factor = 1;
      } else {
        expect(unit !== null && unit in toSi, `${key}: unit ${unit}`).toBe(true);
        factor = toSi[unit!]!;
      }
      const v = Number(text.replace(/^±/, "")) * factor;
      // the page rounds to 5–6 significant digits
      expect(Math.abs(v - (want as number)), `${key}: page ${text} ${unit}, report.json ${want}`).toBeLessThanOrEqual(1e-4 * Math.abs(want as number) + 1e-12);
    }
  });

  it("a bundled phantom with a field map and a B0 linear term: the B0 distortion check follows Δf/BW", async () => {
    expect((await get(port, "/phantoms/maps/disc-shim-map.npy")).status).toBe(200);
    expect((await get(port, "/phantoms/maps/%2e%2e/disc.json")).status).toBe(400);
    // the map: f = 60 Hz·((x − 2 cm)² + y²)/(5 cm)² − 20 Hz; on the disc of radius 5 cm its largest |f| is at x = −5 cm: 97.6 Hz
    const page = await open("protocol=gre-demo-1.5t&phantom=disc-shim-map&set=matrix.read%3D32&set=matrix.phase%3D32");
    const bw = Number(await text(page, "protocol.pixelBandwidth"));
    // displacement along read = Δf / (bandwidth per pixel) (common practice; the same rule as the fat shift)
    expect(Number(await text(page, "checks.distortionRead.value"))).toBeCloseTo(97.6 / bw, 2);
    await page.screenshot({ path: join(SHOTS, "preview-fieldmap.png"), fullPage: true });
    await page.close();
    // a linear term of 20 Hz/cm along x on the plain disc (radius 5 cm): largest |Δf| = 100 Hz
    const p2 = await open("protocol=gre-demo-1.5t&phantom=disc&set=matrix.read%3D32&set=matrix.phase%3D32");
    expect(Number(await text(p2, "checks.distortionRead.value"))).toBeLessThan(1e-9);
    const g = await edit(p2, "#c-b0-x", "20");
    await painted(p2, g);
    expect(p2.url()).toContain("b0=20%2C0%2C0");
    expect(Number(await text(p2, "checks.distortionRead.value"))).toBeCloseTo(100 / bw, 2);
    await p2.screenshot({ path: join(SHOTS, "preview-b0-linear.png"), fullPage: true });
    // a phantom file chosen in the page with its map: without the map it is refused, saying what to choose; with it the map's Δf/BW
    const ph = JSON.parse(readFileSync(join(ROOT, "phantoms/disc-shim-map.json"), "utf8"));
    ph.name = "chosen-map";
    ph.b0.fieldMap.file = "maps/my-map.npy";
    const g0 = await p2.evaluate(() => (window as any).__preview.gen as number);
    await p2.locator("#c-file").setInputFiles([{ name: "chosen-map.json", mimeType: "application/json", buffer: Buffer.from(JSON.stringify(ph)) }]);
    await p2.waitForFunction((n) => (window as any).__preview.error?.gen > n, g0);
    expect(await p2.locator("#general-error").textContent()).toMatch(/b0\.fieldMap\.file: .*choose the phantom file together with its field map maps\/my-map\.npy/);
    const g1 = await p2.evaluate(() => (window as any).__preview.gen as number);
    await p2.locator("#c-file").setInputFiles([
      { name: "chosen-map.json", mimeType: "application/json", buffer: Buffer.from(JSON.stringify(ph)) },
      { name: "my-map.npy", mimeType: "application/octet-stream", buffer: readFileSync(join(ROOT, "phantoms/maps/disc-shim-map.npy")) },
    ]);
    await painted(p2, g1 + 1);
    expect(await p2.locator("#c-phantom").inputValue()).toBe("file:chosen-map.json");
    // the B0 linear term (20 Hz/cm along x) adds to the map: Δf = 24000 Hz/m²·((x − 0.02 m)² + y²) − 20 Hz + 2000 Hz/m·x; on the
    // rim (r = 5 cm) that is 49.6 Hz + 1040 Hz/m·x, largest at x = 5 cm: 101.6 Hz; the interior minimum is −21.7 Hz (x = −2.17 cm)
    expect(Number(await text(p2, "checks.distortionRead.value"))).toBeCloseTo(101.6 / bw, 2);
    await p2.close();
  });
});
