/**
 * Engine worker (worker_threads): receives the plan and the isochromat arrays
 * once (SharedArrayBuffers, read in place), then runs what the pool sends —
 * a chunk (returns its partial k-space, transferred) or a range of RF classes
 * (fills the shared rfMaps in place). Loaded as compiled JavaScript.
 */
import { parentPort, workerData } from "node:worker_threads";
import type { IsochromatSet } from "../isochromats/index.js";
import { ChunkScratch, runChunk } from "./chunk.js";
import { fillRfMaps, type EnginePlan } from "./plan.js";
import { partialLength } from "./fold.js";

export type WorkerRequest = { t: "chunk"; c: number } | { t: "maps"; c0: number; c1: number } | { t: "close" };
export type WorkerReply =
  | { t: "chunk"; c: number; re: ArrayBuffer; im: ArrayBuffer }
  | { t: "maps"; c0: number; c1: number };

const { plan, iso } = workerData as { plan: EnginePlan; iso: IsochromatSet };
let scratch: ChunkScratch | null = null;
const size = partialLength(plan);
const port = parentPort!;

port.on("message", (m: WorkerRequest) => {
  if (m.t === "close") {
    // nothing else keeps this thread alive: it ends on its own (EnginePool.close)
    port.close();
    return;
  }
  if (m.t === "maps") {
    fillRfMaps(plan, m.c0, m.c1);
    port.postMessage({ t: "maps", c0: m.c0, c1: m.c1 } satisfies WorkerReply);
    return;
  }
  scratch ??= new ChunkScratch(plan);
  const re = new Float64Array(size), im = new Float64Array(size);
  runChunk(plan, iso, m.c, re, im, scratch);
  port.postMessage({ t: "chunk", c: m.c, re: re.buffer, im: im.buffer } satisfies WorkerReply, [re.buffer, im.buffer]);
});
