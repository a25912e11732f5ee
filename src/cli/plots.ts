/**
 * report.html's plots on a worker thread (cli/plot-worker.ts). Rendering them
 * with vega costs about half a second of a fresh process (loading vega and
 * vega-lite, then compiling their code); the worker loads them on another
 * core while the run samples the phantom and runs the engine, and draws the
 * plots while the run writes its other files. One worker per
 * process, started by the first run that asks and kept for later runs
 * (unref'd while idle: it never keeps the process alive). Where it cannot
 * help (one core) or fails, the plots are rendered on this thread by the same
 * function: the same SVG either way.
 */
import { availableParallelism } from "node:os";
import { fileURLToPath } from "node:url";
import { Worker } from "node:worker_threads";
import { renderPlots, type PlotRenderer } from "../report/index.js";
import type { PlotReply, PlotRequest } from "./plot-worker.js";

let worker: Worker | null = null;
let failed = false;
let nextId = 0;
const pending = new Map<number, { resolve: (svgs: string[]) => void; reject: (e: Error) => void }>();

function stop(w: Worker, e: Error): void {
  if (worker !== w) return;
  failed = true;
  worker = null;
  for (const p of pending.values()) p.reject(e);
  pending.clear();
  void w.terminate();
}

/**
 * Asks the plot worker to end once it is idle and lets the process wait for
 * that (a run that failed: the thread may still be loading vega, and a
 * thread stopped mid-compilation can take the process down, see
 * engine/pool.ts close()). The next run starts a new one.
 */
export function closePlotWorker(): void {
  const w = worker;
  if (!w) return;
  worker = null;
  for (const p of pending.values()) p.reject(new Error("plot worker closed"));
  pending.clear();
  w.ref();
  w.postMessage({ close: true } satisfies PlotRequest);
}

/**
 * The plot renderer of this process's plot worker, started now if it is not
 * running; undefined where plots are better rendered on this thread (fewer
 * than two cores, `threads` < 2, the worker failed before, or the TypeScript
 * sources run, e.g. under the test runner: the worker script is compiled).
 */
export function plotRenderer(threads: number): PlotRenderer | undefined {
  if (failed || threads < 2 || availableParallelism() < 2) return undefined;
  const script = new URL("./plot-worker.js", import.meta.url);
  if (!fileURLToPath(import.meta.url).endsWith(".js")) return undefined;
  if (!worker) {
    try {
      const w = new Worker(script);
      w.unref();
      w.on("message", (m: PlotReply) => {
        const p = pending.get(m.id);
        if (!p) return;
        pending.delete(m.id);
        if (pending.size === 0) w.unref();
        if ("error" in m) p.reject(new Error(m.error));
        else p.resolve(m.svgs);
      });
      w.on("error", (e) => stop(w, e));
      w.on("exit", (code) => stop(w, new Error(`plot worker exited with code ${code}`)));
      worker = w;
    } catch {
      failed = true;
      return undefined;
    }
  }
  const w = worker;
  return (specs) => {
    if (worker !== w) return renderPlots(specs);
    const id = nextId++;
    const reply = new Promise<string[]>((resolve, reject) => pending.set(id, { resolve, reject }));
    // a request keeps the process alive until its reply
    w.ref();
    w.postMessage({ id, specs } satisfies PlotRequest);
    // the worker failing (or vega failing there) leaves the plots to this thread
    return reply.catch(() => renderPlots(specs));
  };
}
