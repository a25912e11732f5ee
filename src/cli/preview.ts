/**
 * `isofold preview [phantom] [--protocol <file>]`: a small static HTTP server
 * (node:http) for the interactive previewer page (src/preview/, built into
 * dist/preview/ by `npm run build`). The server does no simulation: it serves
 * the page, the bundled phantoms (with their field maps) and presets, and the
 * phantom / protocol named on the command line (with its field map), read and
 * validated once at start. Every path it
 * answers is in a fixed table made at start; anything else is refused.
 */
import type { Command } from "commander";
import { createServer, type IncomingMessage, type Server, type ServerResponse } from "node:http";
import { existsSync, readdirSync, readFileSync } from "node:fs";
import { basename, dirname, extname, join, resolve } from "node:path";
import { spawn } from "node:child_process";
import { UserError } from "../errors.js";
import { loadPhantom, loadProtocol, presetsDir, readRealNpy, resolvePresetOrFile } from "./inputs.js";
import { SAFETY_NOTE } from "../api.js";
import { parseJsonStrict } from "../json.js";
import { intArg, repoRoot } from "./options.js";

const TYPES: Record<string, string> = {
  ".html": "text/html; charset=utf-8",
  ".js": "text/javascript; charset=utf-8",
  ".css": "text/css; charset=utf-8",
  ".json": "application/json; charset=utf-8",
  ".wasm": "application/wasm",
  ".npy": "application/octet-stream",
};

/**
 * The field-map file a phantom object names (b0.fieldMap.file), when it is a
 * plain relative path inside the phantom's folder (no "." or ".." step, not
 * absolute, no backslash); else null (the page then says the map is not bundled).
 */
function mapPath(phantom: unknown): string | null {
  const f = (phantom as { b0?: { fieldMap?: { file?: unknown } } } | null)?.b0?.fieldMap?.file;
  if (typeof f !== "string" || !f.endsWith(".npy") || f.startsWith("/") || f.includes("\\") || f.includes("\0")) return null;
  const steps = f.split("/");
  return steps.some((x) => x === "" || x === "." || x === "..") ? null : f;
}

/** The page may run its own scripts, workers and WebAssembly, and nothing from elsewhere. */
const CSP = "default-src 'none'; script-src 'self' 'wasm-unsafe-eval'; worker-src 'self'; style-src 'self'; img-src 'self' blob: data:; connect-src 'self'; base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

/** Folder of the built page: dist/preview beside the compiled CLI (dist/src/cli → ../../preview). */
export function previewDir(): string {
  return resolve(repoRoot(), "dist", "preview");
}

type Json = null | boolean | number | string | Json[] | { [k: string]: Json };
type Obj = { [k: string]: Json };
const isObj = (v: Json | undefined): v is Obj => typeof v === "object" && v !== null && !Array.isArray(v);

function merge(base: Obj, over: Obj): Obj {
  const out: Obj = { ...base };
  for (const [k, v] of Object.entries(over)) {
    const b = Object.prototype.hasOwnProperty.call(out, k) ? out[k] : undefined;
    Object.defineProperty(out, k, { value: isObj(b) && isObj(v) ? merge(b, v) : v, enumerable: true, writable: true, configurable: true });
  }
  return out;
}

/** A protocol file with its `extend` chain resolved into one object (the file was validated by loadProtocol first). */
function protocolObject(file: string, depth = 0): Obj {
  const json = parseJsonStrict(readFileSync(file, "utf8"), file) as Json;
  if (!isObj(json) || depth > 20) return {};
  const ext = json["extend"];
  if (typeof ext !== "string") return json;
  const target = resolvePresetOrFile(ext, dirname(file));
  const { extend: _drop, ...rest } = json;
  return target ? merge(protocolObject(target, depth + 1), rest) : rest;
}

export interface PreviewServerOptions {
  phantom?: string;
  protocol?: string;
  host: string;
  port: number;
  /** Refuse requests whose Host header is not this machine's loopback name (DNS rebinding). */
  localOnly?: boolean;
  /** Served folder of the built page (default dist/preview). */
  pageDir?: string;
}

export interface PreviewServer {
  server: Server;
  url: string;
  close(): Promise<void>;
}

/** Why a request path is refused, or null when it may be looked up. */
export function refusedPath(rawUrl: string): string | null {
  if (!rawUrl.startsWith("/")) return "only paths starting with / are served";
  const path = rawUrl.split("?")[0]!.split("#")[0]!;
  let decoded: string;
  try {
    decoded = decodeURIComponent(path);
  } catch {
    return "the path is not valid percent-encoding";
  }
  if (path.startsWith("//") || decoded.startsWith("//")) return "absolute paths are not served";
  if (decoded.includes("\0") || decoded.includes("\\")) return "the path holds a NUL or backslash";
  if (decoded.split("/").some((s) => s === ".." || s === ".")) return "paths with . or .. segments are not served";
  if (/^\/[a-zA-Z]:/.test(decoded)) return "absolute paths are not served";
  return null;
}

/** The fixed table of served paths → file contents (read now, so nothing outside it can ever be read). */
function servedFiles(o: PreviewServerOptions): { files: Map<string, { body: Buffer; type: string }>; startQuery: string } {
  const files = new Map<string, { body: Buffer; type: string }>();
  const pageDir = o.pageDir ?? previewDir();
  const index = join(pageDir, "index.html");
  if (!existsSync(index)) throw new UserError(`the previewer page is not built (no ${index}); run npm run build`);
  for (const f of readdirSync(pageDir)) {
    const type = TYPES[extname(f)];
    if (type) files.set(`/${f}`, { body: readFileSync(join(pageDir, f)), type });
  }
  files.set("/", files.get("/index.html")!);
  const presets = readdirSync(presetsDir()).filter((f) => f.endsWith(".json")).sort();
  for (const f of presets) files.set(`/presets/${f}`, { body: readFileSync(join(presetsDir(), f)), type: TYPES[".json"]! });
  const phDir = join(repoRoot(), "phantoms");
  const phantoms = readdirSync(phDir).filter((f) => f.endsWith(".json")).sort();
  for (const f of phantoms) {
    const body = readFileSync(join(phDir, f));
    files.set(`/phantoms/${f}`, { body, type: TYPES[".json"]! });
    // a bundled phantom's field map, from the phantoms folder only
    let map: string | null = null;
    try {
      map = mapPath(JSON.parse(body.toString("utf8")));
    } catch { /* not JSON: the page's validator says so */ }
    if (map && existsSync(join(phDir, map)) && resolve(phDir, map).startsWith(resolve(phDir) + "/")) {
      files.set(`/phantoms/${map}`, { body: readFileSync(join(phDir, map)), type: TYPES[".npy"]! });
    }
  }

  // the inputs named on the command line: validated here so a bad file is a one-line error before the server starts
  let protocolName = "gre-demo-1.5t";
  let given: { protocol?: { name: string; object: Obj }; phantom?: { name: string; object: unknown }; maps?: { name: string; url: string }[] } = {};
  const presetNames = presets.map((f) => f.replace(/\.json$/, ""));
  if (o.protocol !== undefined) {
    const protocol = loadProtocol(o.protocol, []);
    if (presetNames.includes(o.protocol) && !existsSync(o.protocol)) protocolName = o.protocol;
    else {
      protocolName = `file:${basename(o.protocol)}`;
      given.protocol = { name: protocolName, object: protocolObject(resolve(o.protocol)) };
    }
    void protocol;
  }
  let phantomName = "two-bottle";
  const phantomNames = phantoms.map((f) => f.replace(/\.json$/, ""));
  if (o.phantom !== undefined) {
    const bundled = o.phantom.replace(/\.json$/, "");
    if (phantomNames.includes(bundled) && !existsSync(o.phantom)) phantomName = bundled;
    else {
      if (!existsSync(o.phantom)) throw new UserError(`no phantom file or bundled phantom named ${JSON.stringify(o.phantom)}; bundled: ${phantomNames.join(", ")}`);
      const field = o.protocol !== undefined ? loadProtocol(o.protocol, []).field : 1.5;
      const ph = loadPhantom(o.phantom, field, { readArray: readRealNpy });
      const raw = parseJsonStrict(readFileSync(o.phantom, "utf8"), o.phantom);
      void ph;
      // its field map (loaded and checked above) is served under /input/ for the page's worker
      const map = (raw as { b0?: { fieldMap?: { file?: unknown } } })?.b0?.fieldMap?.file;
      if (typeof map === "string") {
        const served = `/input/${basename(map).replace(/[^A-Za-z0-9._-]/g, "_")}`;
        files.set(served, { body: readFileSync(map.startsWith("/") ? map : join(dirname(resolve(o.phantom)), map)), type: TYPES[".npy"]! });
        given.maps = [{ name: map, url: served.slice(1) }];
      }
      phantomName = `file:${basename(o.phantom)}`;
      given.phantom = { name: phantomName, object: raw };
    }
  } else if (given.protocol === undefined && o.protocol === undefined) {
    phantomName = "two-bottle";
  }
  const config = {
    safety: SAFETY_NOTE,
    presets: presetNames,
    phantoms: phantomNames,
    start: { protocol: protocolName, phantom: phantomName },
    given,
  };
  files.set("/config.json", { body: Buffer.from(JSON.stringify(config)), type: TYPES[".json"]! });
  const q = new URLSearchParams({ protocol: protocolName, phantom: phantomName });
  return { files, startQuery: q.toString() };
}

function send(res: ServerResponse, status: number, type: string, body: Buffer | string, head: boolean): void {
  res.writeHead(status, {
    "Content-Type": type,
    "Content-Length": Buffer.byteLength(body),
    "Content-Security-Policy": CSP,
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "Cache-Control": "no-store",
    "Cross-Origin-Opener-Policy": "same-origin",
    "Cross-Origin-Embedder-Policy": "require-corp",
    "Cross-Origin-Resource-Policy": "same-origin",
  });
  res.end(head ? undefined : body);
}

/** Starts the server; resolves once it listens. */
export async function startPreviewServer(o: PreviewServerOptions): Promise<PreviewServer> {
  const { files, startQuery } = servedFiles(o);
  const server = createServer((req: IncomingMessage, res: ServerResponse) => {
    const head = req.method === "HEAD";
    if (req.method !== "GET" && !head) {
      res.setHeader("Allow", "GET, HEAD");
      return send(res, 405, "text/plain; charset=utf-8", "only GET and HEAD are served\n", false);
    }
    const hostHeader = (req.headers.host ?? "").replace(/:\d+$/, "");
    if (o.localOnly && !["127.0.0.1", "localhost", "[::1]"].includes(hostHeader)) {
      return send(res, 421, "text/plain; charset=utf-8", "refused: the previewer answers only requests addressed to 127.0.0.1 or localhost\n", head);
    }
    const raw = req.url ?? "";
    const why = refusedPath(raw);
    if (why) return send(res, 400, "text/plain; charset=utf-8", `refused: ${why}\n`, head);
    const path = decodeURIComponent(raw.split("?")[0]!.split("#")[0]!);
    const f = files.get(path);
    if (!f) return send(res, 404, "text/plain; charset=utf-8", "not found: the previewer serves only its page, the bundled phantoms and presets\n", head);
    send(res, 200, f.type, f.body, head);
  });
  await new Promise<void>((ok, fail) => {
    server.once("error", (e: NodeJS.ErrnoException) => {
      if (e.code === "EADDRINUSE") fail(new UserError(`port ${o.port} on ${o.host} is in use; choose another with --port, or --port 0 for a free one`));
      else if (e.code === "EADDRNOTAVAIL" || e.code === "ENOTFOUND") fail(new UserError(`cannot listen on ${o.host}: not an address of this machine; --host 127.0.0.1 works`));
      else if (e.code === "EACCES") fail(new UserError(`no permission to listen on port ${o.port}; use a port above 1023, or --port 0`));
      else fail(e);
    });
    server.listen(o.port, o.host, () => ok());
  });
  const addr = server.address();
  const port = typeof addr === "object" && addr ? addr.port : o.port;
  const hostPart = o.host.includes(":") ? `[${o.host}]` : o.host;
  const url = `http://${hostPart}:${port}/?${startQuery}`;
  return {
    server,
    url,
    close: () => new Promise<void>((ok) => {
      server.closeAllConnections();
      server.close(() => ok());
    }),
  };
}

/** Tries to open the URL in the desktop's browser; on a machine without one it says so and the server keeps running. */
function openBrowser(url: string): void {
  const cmd = process.platform === "darwin" ? "open" : process.platform === "win32" ? "explorer" : "xdg-open";
  const fail = (why: string) => process.stderr.write(`warning: could not open a browser (${why}); open ${url} yourself\n`);
  try {
    const child = spawn(cmd, [url], { stdio: "ignore", detached: true });
    child.on("error", (e) => fail(e.message));
    child.on("exit", (code) => {
      if (code !== 0 && code !== null) fail(`${cmd} exited with code ${code}`);
    });
    child.unref();
  } catch (e) {
    fail((e as Error).message);
  }
}

export function registerPreview(program: Command): void {
  program
    .command("preview")
    .description("serve the interactive previewer page on this machine (the simulation runs in the page; the server only serves files)")
    .argument("[phantom]", "bundled phantom name (e.g. torso-slice) or a phantom file (JSON); default two-bottle")
    .option("-p, --protocol <file>", "protocol file (JSON) or bundled preset name to start from; default gre-demo-1.5t")
    .option("--port <n>", "TCP port (0 picks a free one)", intArg("--port", 0, 65535), 8737)
    .option("--host <address>", "address to listen on; anything but 127.0.0.1 (the default) lets other machines reach the page", "127.0.0.1")
    .option("--open", "open the page in this desktop's browser")
    .option("--no-open", "do not open a browser (the default)")
    .action(async (phantom: string | undefined, o: { protocol?: string; port: number; host: string; open?: boolean }) => {
      const local = o.host === "127.0.0.1" || o.host === "::1" || o.host === "localhost";
      const s = await startPreviewServer({ phantom, protocol: o.protocol, host: o.host, port: o.port, localOnly: local });
      if (!local) {
        process.stderr.write(`warning: listening on ${o.host}, not 127.0.0.1: other machines that can reach this address can open the page and the bundled files\n`);
      }
      console.log(`isofold preview: ${s.url}`);
      console.log("the server only serves files; the simulation runs in the page. Ctrl-C stops it.");
      console.log(SAFETY_NOTE);
      if (o.open === true) openBrowser(s.url);
      const stop = () => {
        void s.close().then(() => process.exit(0));
      };
      process.once("SIGINT", stop);
      process.once("SIGTERM", stop);
    });
}
