/**
 * Node's helper thread for the fast readout operator (engine/fast.ts
 * setPhaseHelper): one worker_threads thread, started on first use and kept
 * (unref'd: it never keeps the process alive) for later runs. It shares the
 * phase step of a run's blocks through shared memory (engine/fast-phase.ts);
 * every element of k-space is computed by the same arithmetic on whichever
 * thread, so the bits do not depend on it. With one core there is no helper.
 */
import { createRequire } from "node:module";
import { availableParallelism } from "node:os";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";
import { Worker } from "node:worker_threads";
import { setPhaseHelper, type PhaseHelper } from "./fast.js";

let worker: Worker | null = null;
let failed = false;
let sourceWorker: URL | null = null;

/** Compiled: fast-worker.js beside this file; from the TypeScript sources (vitest): bundled in memory with esbuild, as pool.ts does for its worker. */
function helperPath(): string | URL {
  const here = fileURLToPath(import.meta.url);
  if (here.endsWith(".js")) return join(dirname(here), "fast-worker.js");
  if (sourceWorker) return sourceWorker;
  const esbuild = createRequire(import.meta.url)("esbuild") as { buildSync: (o: object) => { outputFiles: { contents: Uint8Array }[] } };
  const built = esbuild.buildSync({ entryPoints: [join(dirname(here), "fast-worker.ts")], bundle: true, platform: "node", format: "esm", write: false, logLevel: "error" });
  sourceWorker = new URL(`data:text/javascript;base64,${Buffer.from(built.outputFiles[0]!.contents).toString("base64")}`);
  return sourceWorker;
}

/** The helper thread, or null where there is none (one core, or it failed to start; a run with one worker, Executor.threads = 1, does not ask). */
export function nodePhaseHelper(): PhaseHelper | null {
  if (failed || availableParallelism() < 2) return null;
  if (!worker) {
    try {
      const w = new Worker(helperPath());
      w.unref();
      // a helper that fails only stops helping: the main thread transforms every block it hands over and finds untaken
      w.on("error", () => {
        failed = true;
        worker = null;
      });
      w.on("exit", () => {
        if (worker === w) worker = null;
      });
      worker = w;
    } catch {
      failed = true;
      return null;
    }
  }
  const w = worker;
  return { start: (shared) => w.postMessage(shared) };
}

setPhaseHelper(nodePhaseHelper);
