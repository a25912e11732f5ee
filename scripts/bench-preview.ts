/**
 * `npm run bench:preview`: edit-to-paint latency of the previewer page, driven
 * in Debian's chromium by playwright-core. For each matrix (64², 128², 256²)
 * the two-bottle phantom with the gre-demo-1.5t preset is opened, then 50
 * bandwidth edits are made one after another (each waits for its painted
 * preview-quality image); the page's own Performance API measure (input event
 * → the frame after the image is drawn) is collected. Prints median and 90th
 * percentile and the median of each stage (the page's latency record).
 * A benchmark, never a test. BENCH_EDITS changes the count, BENCH_SIZES the
 * matrices, BENCH_PAUSE_MS the pause after each painted edit.
 */
import { spawn } from "node:child_process";
import { mkdtempSync, rmSync } from "node:fs";
import { cpus, loadavg, tmpdir } from "node:os";
import { join, resolve, dirname } from "node:path";
import { fileURLToPath } from "node:url";
import { chromium } from "playwright-core";

const ROOT = resolve(dirname(fileURLToPath(import.meta.url)), "../..");
const EDITS = Number(process.env["BENCH_EDITS"] ?? 50);
const PHANTOM = process.env["BENCH_PHANTOM"] ?? "two-bottle";
const PROTOCOL = process.env["BENCH_PROTOCOL"] ?? "gre-demo-1.5t";
const SIZES = (process.env["BENCH_SIZES"] ?? "64,128,256").split(",").map(Number);
/** Milliseconds between a painted image and the next edit (default 0: edits back to back, so the refinement never starts). With BENCH_PAUSE_MS=400 each edit lands while the previous one is being refined. */
const PAUSE_MS = Number(process.env["BENCH_PAUSE_MS"] ?? 0);

function pct(xs: number[], p: number): number {
  const s = [...xs].sort((a, b) => a - b);
  return s[Math.min(s.length - 1, Math.ceil((p / 100) * s.length) - 1)]!;
}

const server = spawn(process.execPath, [join(ROOT, "dist/src/cli/index.js"), "preview", "--port", "0"], { stdio: ["ignore", "pipe", "inherit"] });
const base = await new Promise<string>((ok) => {
  let out = "";
  server.stdout!.on("data", (d) => {
    out += String(d);
    const m = /isofold preview: (http:\S+?\/)\?/.exec(out);
    if (m) ok(m[1]!);
  });
});
const dir = mkdtempSync(join(tmpdir(), "isofold-bench-preview-"));
const ctx = await chromium.launchPersistentContext(join(dir, "profile"), {
  executablePath: "/usr/bin/chromium", headless: true, viewport: { width: 1280, height: 1000 },
  args: ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update", "--no-first-run"],
});
console.log(`previewer edit-to-paint latency, ${PHANTOM} with ${PROTOCOL}, ${EDITS} bandwidth edits per size, preview quality (density 1, 3 through-slice isochromats, no T2′ spread)`);
console.log("matrix   median ms   p90 ms   min ms   max ms   medians of the stages (ms): to the worker, queued, in the worker (prepare, engine [setup + chunks on the engine workers], recon, pack), back, drawing the image, to the painted frame");
try {
  for (const n of SIZES) {
    const page = await ctx.newPage();
    await page.goto(`${base}?protocol=${PROTOCOL}&phantom=${PHANTOM}&set=matrix.read%3D${n}&set=matrix.phase%3D${n}`);
    page.on("pageerror", (e) => console.error("page error:", e.message));
    await page.waitForFunction(() => (window as any).__preview?.painted > 0, null, { timeout: 60_000 }).catch(async (e) => { console.error(await page.evaluate(() => JSON.stringify({ e: (window as any).__preview?.error, s: document.getElementById("status")?.textContent, u: location.href }))); throw e; });
    const ms: number[] = [];
    const steps: Record<string, number[]> = {};
    for (let i = 0; i < EDITS; i++) {
      const bw = 120 + 10 * (i % 12);
      const g0 = await page.evaluate(() => (window as any).__preview.gen as number);
      await page.locator("#c-bandwidth").fill(String(bw));
      await page.locator("#c-bandwidth").press("Tab");
      await page.waitForFunction((g) => (window as any).__preview.painted > g, g0, { timeout: 120_000 });
      const r = await page.evaluate(() => {
        const p = (window as any).__preview;
        const l = p.latencies[p.latencies.length - 1];
        return { ms: l.ms as number, t: l.stages as Record<string, number> };
      });
      ms.push(r.ms);
      for (const [k, v] of Object.entries(r.t)) (steps[k] ??= []).push(v);
      if (PAUSE_MS > 0) await page.waitForTimeout(PAUSE_MS);
    }
    const med = (xs: number[] | undefined) => (xs && xs.length ? pct(xs, 50).toFixed(0) : "?");
    // edits that found the refinement at work share the cores with its start and end: told apart below
    const calm = ms.filter((_, i) => !(steps.refining?.[i]! > 0));
    console.log(`${`${n}²`.padEnd(8)} ${pct(ms, 50).toFixed(0).padStart(9)}   ${pct(ms, 90).toFixed(0).padStart(6)}   ${Math.min(...ms).toFixed(0).padStart(6)}   ${Math.max(...ms).toFixed(0).padStart(6)}   ` +
      `to worker ${med(steps.toWorker)}, queued ${med(steps.queued)}, worker ${med(steps.total)} (${med(steps.prepare)}, ${med(steps.engine)} [${med(steps.engineSetup)} + ${med(steps.engineChunks)}], ${med(steps.recon)}, ${med(steps.pack)}), back ${med(steps.back)}, draw ${med(steps.draw)}, frame ${med(steps.frame)}; ${(steps.refining ?? []).filter((x) => x > 0).length} edits came while refining` +
      ` (the other ${calm.length}: median ${med(calm)}, p90 ${calm.length ? pct(calm, 90).toFixed(0) : "?"}); load average ${loadavg()[0]!.toFixed(1)} on ${cpus().length} cores`);
    await page.close();
  }
} finally {
  await ctx.close();
  server.kill("SIGTERM");
  rmSync(dir, { recursive: true, force: true });
}
