/**
 * In-process stand-ins for Web Workers, for testing the Web Worker executor
 * (engine/web.ts) in Node: each stand-in serves the engine worker's messages
 * (serveEngineWorker) with structured clones delivered later, in order, as a
 * browser would deliver them (transfers included).
 */
import { serveEngineWorker, type WebWorkerLike } from "../src/engine/index.js";

export function standIns(n: number): WebWorkerLike[] {
  return Array.from({ length: n }, () => {
    const w: WebWorkerLike = {
      onmessage: null,
      postMessage(m, transfer) {
        const copy = structuredClone(m, { transfer });
        setTimeout(() => serve({ data: copy }), 0);
      },
    };
    const serve = serveEngineWorker((r, transfer) => {
      const copy = structuredClone(r, { transfer: transfer ?? [] });
      setTimeout(() => w.onmessage?.({ data: copy }), 0);
    });
    return w;
  });
}
