/**
 * Where a worker_threads script of the engine comes from. Compiled: the .js
 * file of that name beside this one. Running the TypeScript sources (vitest):
 * the .ts file and what it imports, bundled now in memory with esbuild (a
 * development dependency) and handed to the worker as a data: URL, so tests
 * run the code under test, never a stale dist/ build, and no temporary file
 * is left behind. Node only.
 */
import { createRequire } from "node:module";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";

const bundled = new Map<string, URL>();

/** The script of engine worker `name` ("worker", "fast-worker"): a path, or a data: URL from the sources. */
export function engineWorkerScript(name: string): string | URL {
  const here = fileURLToPath(import.meta.url);
  if (here.endsWith(".js")) return join(dirname(here), `${name}.js`);
  const cached = bundled.get(name);
  if (cached) return cached;
  const esbuild = createRequire(import.meta.url)("esbuild") as { buildSync: (o: object) => { outputFiles: { contents: Uint8Array }[] } };
  const built = esbuild.buildSync({ entryPoints: [join(dirname(here), `${name}.ts`)], bundle: true, platform: "node", format: "esm", write: false, logLevel: "error" });
  const url = new URL(`data:text/javascript;base64,${Buffer.from(built.outputFiles[0]!.contents).toString("base64")}`);
  bundled.set(name, url);
  return url;
}
