/** The previewer's engine worker: runs the chunks and RF maps the Web Worker executor (engine/web.ts) sends it. */
import { serveEngineWorker } from "../engine/web.js";

declare const self: { postMessage(m: unknown, transfer?: ArrayBuffer[]): void; onmessage: ((ev: MessageEvent) => void) | null };

self.onmessage = serveEngineWorker((m, transfer) => self.postMessage(m, transfer ?? []));
