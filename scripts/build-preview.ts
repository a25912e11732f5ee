/**
 * Builds the previewer page into dist/preview/ with esbuild: the page script,
 * the engine worker (the core bundled for the browser; Node built-ins the core
 * still imports are replaced by the small stand-ins of src/preview/shims,
 * which exist only in this bundle), index.html and style.css.
 */
import { build, type Plugin } from "esbuild";
import { copyFileSync, mkdirSync } from "node:fs";
import { dirname, join, resolve } from "node:path";
import { fileURLToPath } from "node:url";

const root = resolve(dirname(fileURLToPath(import.meta.url)), "../..");
const src = join(root, "src/preview");
const out = join(root, "dist/preview");

const SHIM: Record<string, string> = {
  "node:fs": "shims/vfs.ts", fs: "shims/vfs.ts",
  "node:path": "shims/path.ts", path: "shims/path.ts",
  "node:module": "shims/module.ts",
  "node:url": "shims/misc.ts", "node:os": "shims/misc.ts", "node:worker_threads": "shims/misc.ts", "node:crypto": "shims/misc.ts",
  "node:child_process": "shims/misc.ts", "node:zlib": "shims/misc.ts", "node:util": "shims/misc.ts", pngjs: "shims/misc.ts",
};

const shims: Plugin = {
  name: "isofold-preview-shims",
  setup(b) {
    b.onResolve({ filter: /^(node:.*|fs|path|pngjs)$/ }, (a) => {
      const f = SHIM[a.path];
      if (!f) return { errors: [{ text: `the previewer bundle has no stand-in for ${a.path} (imported by ${a.importer})` }] };
      return { path: join(src, f) };
    });
  },
};

export async function buildPreview(): Promise<void> {
  mkdirSync(out, { recursive: true });
  const common = { bundle: true, platform: "browser" as const, target: "es2022", logLevel: "warning" as const, legalComments: "none" as const, minify: true, sourcemap: false };
  await build({
    ...common, entryPoints: [join(src, "worker.ts")], outfile: join(out, "worker.js"), format: "esm", plugins: [shims],
    inject: [join(src, "shims/process.ts")],
    // where the core's modules think they live: presets resolve to /src/protocol/presets in the worker's file table
    define: { "import.meta.url": JSON.stringify("file:///isofold/src/protocol/parse.js") },
  });
  await build({ ...common, entryPoints: [join(src, "main.ts")], outfile: join(out, "app.js"), format: "esm", plugins: [shims] });
  copyFileSync(join(src, "index.html"), join(out, "index.html"));
  copyFileSync(join(src, "style.css"), join(out, "style.css"));
}

await buildPreview();
