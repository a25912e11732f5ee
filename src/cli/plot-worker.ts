/**
 * The thread that renders report.html's plots for the command line
 * (cli/plots.ts): it loads vega and vega-lite as soon as it starts, so both
 * are loaded by the time a run's image is ready; then it renders each
 * request's specifications in order with the same function as the main
 * thread (report/plots.ts), so the SVG is the same text.
 */
import { parentPort } from "node:worker_threads";
import { loadPlotLibraries, vegaLiteSvg } from "../report/plots.js";

/** Specifications to render, or `close`: end once everything under way is done (the thread then exits on its own). */
export type PlotRequest = { id: number; specs: Record<string, unknown>[] } | { close: true };

export type PlotReply = { id: number; svgs: string[] } | { id: number; error: string };

const port = parentPort!;
// vega and vega-lite load now, while the run samples and simulates (no throw-away plot: on a busy
// machine its compilation costs more than it saves)
let queue: Promise<void> = loadPlotLibraries().then(() => {}, () => {});

port.on("message", (m: PlotRequest) => {
  if ("close" in m) {
    void queue.then(() => port.close());
    return;
  }
  queue = queue.then(async () => {
    let reply: PlotReply;
    try {
      const svgs: string[] = [];
      for (const spec of m.specs) svgs.push(await vegaLiteSvg(spec));
      reply = { id: m.id, svgs };
    } catch (e) {
      reply = { id: m.id, error: e instanceof Error ? e.message : String(e) };
    }
    port.postMessage(reply);
  });
});
