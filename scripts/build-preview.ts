/**
 * Builds the previewer page into dist/preview/ with esbuild: the engine worker
 * (the library core bundled for the browser: any Node built-in it pulled in
 * fails the build), the engine worker of the Web Worker executor, the page script, index.html and style.css. The page script
 * uses only the PNG text-chunk helpers of io/png.ts; the PNG encoder that file
 * also imports (pngjs, Node streams) is replaced by a stub that throws.
 */
import { build, type Plugin } from "esbuild";
import { copyFileSync, mkdirSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "../..");
const src = join(root, "src/preview");
const out = join(root, "dist/preview");

/** Fails the build on any Node built-in; `stubs` names the modules replaced by src/preview/stub.ts instead. */
function browserOnly(stubs: string[]): Plugin {
  return {
    name: "isofold-browser-only",
    setup(b) {
      b.onResolve({ filter: /^(node:.*|fs|path|os|url|module|crypto|zlib|stream|util|events|worker_threads|child_process|pngjs)$/ }, (a) => {
        if (stubs.includes(a.path)) return { path: join(src, "stub.ts") };
        return { errors: [{ text: `${a.path} is a Node module: the previewer bundle must not pull it in (imported by ${a.importer})` }] };
      });
    },
  };
}

export async function buildPreview(): Promise<void> {
  mkdirSync(out, { recursive: true });
  const common = { bundle: true, platform: "browser" as const, target: "es2022", logLevel: "warning" as const, legalComments: "none" as const, minify: true, sourcemap: false };
  await build({
    ...common, entryPoints: [join(src, "worker.ts")], outfile: join(out, "worker.js"), format: "esm", plugins: [browserOnly([])],
  });
  await build({
    ...common, entryPoints: [join(src, "engine-worker.ts")], outfile: join(out, "engine-worker.js"), format: "esm", plugins: [browserOnly([])],
  });
  await build({ ...common, entryPoints: [join(src, "main.ts")], outfile: join(out, "app.js"), format: "esm", plugins: [browserOnly(["pngjs"])] });
  copyFileSync(join(src, "index.html"), join(out, "index.html"));
  copyFileSync(join(src, "style.css"), join(out, "style.css"));
}

await buildPreview();
