/**
 * What the browser tests share: Debian's chromium launched headless through
 * playwright-core with a fresh profile (never a downloaded browser), and the
 * previewer's server started on a free port.
 */
import { spawn, type ChildProcess } from "node:child_process";
import { existsSync } from "node:fs";
import { join } from "node:path";
import { chromium, type BrowserContext } from "playwright-core";

export const CHROMIUM = "/usr/bin/chromium";

/** Headless chromium on a fresh user-data folder `profile` (viewport as given; downloads accepted). */
export async function launchChromium(profile: string, viewport: { width: number; height: number }): Promise<BrowserContext> {
  if (!existsSync(CHROMIUM)) throw new Error(`${CHROMIUM} is missing: the browser tests need Debian's chromium, which .ci/run installs (apt-get install chromium)`);
  return chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM, headless: true, viewport, acceptDownloads: true,
    args: ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update", "--no-first-run"],
  });
}

/** `isofold preview --port 0 --no-open` of the CLI at `cli`, resolved once it prints its address. */
export async function startPreviewServer(cli: string): Promise<{ server: ChildProcess; base: string; port: number }> {
  const server = spawn(process.execPath, [cli, "preview", "--port", "0", "--no-open"], { stdio: ["ignore", "pipe", "pipe"] });
  const m = await new Promise<RegExpExecArray>((ok, fail) => {
    let out = "";
    server.stdout!.on("data", (d) => {
      out += String(d);
      const r = /isofold preview: (http:\/\/127\.0\.0\.1:(\d+)\/)/.exec(out);
      if (r) ok(r);
    });
    server.on("exit", (c) => fail(new Error(`preview exited with ${c}`)));
  });
  return { server, base: m[1]!, port: Number(m[2]) };
}

