/**
 * `isofold preview` as a command: a user error is one line and exit 2 before
 * anything listens; another address than 127.0.0.1 only with --host and a
 * printed warning; --open on a machine without a desktop browser says so and
 * keeps serving; requests addressed to another host name are refused.
 */
import { describe, expect, it } from "vitest";
import { spawn, spawnSync } from "node:child_process";
import { request } from "node:http";
import { join, resolve } from "node:path";
import { copyFileSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";

const ROOT = resolve(__dirname, "..");
const CLI = join(ROOT, "dist/src/cli/index.js");

function startPreview(args: string[], env: NodeJS.ProcessEnv = process.env): Promise<{ url: string; port: number; stderr: () => string; stop: () => void }> {
  const p = spawn(process.execPath, [CLI, "preview", "--port", "0", ...args], { stdio: ["ignore", "pipe", "pipe"], env });
  let err = "";
  p.stderr!.on("data", (d) => (err += String(d)));
  return new Promise((ok, fail) => {
    let out = "";
    p.stdout!.on("data", (d) => {
      out += String(d);
      const m = /isofold preview: (http:\/\/\S+:(\d+)\/\S*)/.exec(out);
      if (m) ok({ url: m[1]!, port: Number(m[2]), stderr: () => err, stop: () => p.kill("SIGTERM") });
    });
    p.on("exit", (c) => fail(new Error(`exited ${c}: ${err}`)));
  });
}

function get(port: number, path: string, host?: string): Promise<number> {
  return new Promise((ok, fail) => {
    const r = request({ host: "127.0.0.1", port, path, headers: host ? { Host: host } : {} }, (res) => {
      res.resume();
      res.on("end", () => ok(res.statusCode ?? 0));
    });
    r.on("error", fail);
    r.end();
  });
}

describe("isofold preview (command)", () => {
  it("refuses a missing phantom file with one line and exit 2", () => {
    const r = spawnSync(process.execPath, [CLI, "preview", "no-such-phantom.json", "--port", "0"], { encoding: "utf8" });
    expect(r.status).toBe(2);
    expect(r.stderr.trim().split("\n")).toHaveLength(1);
    expect(r.stderr).toMatch(/no phantom file or bundled phantom named .*bundled: .*two-bottle/);
    expect(r.stdout).toBe("");
  });

  it("refuses a bad protocol with the protocol's message", () => {
    const r = spawnSync(process.execPath, [CLI, "preview", "--protocol", "no-such-preset", "--port", "0"], { encoding: "utf8" });
    expect(r.status).toBe(2);
    expect(r.stderr).toMatch(/no protocol file or preset named/);
  });

  it("binds 127.0.0.1 by default, serves the page and refuses other Host names", async () => {
    const s = await startPreview(["torso-slice", "--protocol", "gre-t1-3t"]);
    try {
      expect(s.url).toMatch(/^http:\/\/127\.0\.0\.1:\d+\/\?protocol=gre-t1-3t&phantom=torso-slice$/);
      expect(s.stderr()).toBe("");
      expect(await get(s.port, "/")).toBe(200);
      expect(await get(s.port, "/worker.js")).toBe(200);
      expect(await get(s.port, "/", "attacker.example:80")).toBe(421);
    } finally {
      s.stop();
    }
  });

  it("warns when --host is another address, and --open without a browser says so and keeps serving", async () => {
    const s = await startPreview(["--host", "0.0.0.0", "--open"], { ...process.env, PATH: "/nonexistent", DISPLAY: "" });
    try {
      await new Promise((r) => setTimeout(r, 500));
      expect(s.stderr()).toMatch(/warning: listening on 0\.0\.0\.0, not 127\.0\.0\.1/);
      expect(s.stderr()).toMatch(/could not open a browser .*open http:\/\/0\.0\.0\.0:\d+\/.* yourself/);
      expect(await get(s.port, "/config.json", `127.0.0.1:${s.port}`)).toBe(200);
    } finally {
      s.stop();
    }
  });

  it("a phantom file with a field map beside it: the server serves that map (and config.json names it) for the page", async () => {
    const dir = mkdtempSync(join(tmpdir(), "isofold-preview-map-"));
    const ph = JSON.parse(readFileSync(join(ROOT, "phantoms/disc-shim-map.json"), "utf8"));
    ph.b0.fieldMap.file = "shim.npy";
    writeFileSync(join(dir, "ph.json"), JSON.stringify(ph));
    copyFileSync(join(ROOT, "phantoms/maps/disc-shim-map.npy"), join(dir, "shim.npy"));
    const s = await startPreview([join(dir, "ph.json")]);
    try {
      expect(await get(s.port, "/input/shim.npy")).toBe(200);
      expect(await get(s.port, "/input/ph.json")).toBe(404);
      const cfg = await new Promise<string>((ok) => request({ host: "127.0.0.1", port: s.port, path: "/config.json" }, (res) => { let b = ""; res.on("data", (d) => (b += String(d))); res.on("end", () => ok(b)); }).end());
      expect(JSON.parse(cfg).given.maps).toEqual([{ name: "shim.npy", url: "input/shim.npy" }]);
    } finally {
      s.stop();
      rmSync(dir, { recursive: true, force: true });
    }
  });
});
