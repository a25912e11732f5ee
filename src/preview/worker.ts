/**
 * The previewer's Web Worker: holds the presets and phantoms (and field maps)
 * in its file table and runs each request through the library's pipeline,
 * the engine on the Web Worker executor (engine/web.ts) over engine workers
 * it starts once and keeps. The page runs two: one answers each edit at
 * preview quality and then the closed-form check; the other refines the
 * newest edit to default quality. The page writes the newest edit's number
 * into a shared Int32 (or posts it when memory cannot be shared); work for an
 * older edit stops at the next engine chunk.
 */
import { webWorkerExecutor, type Executor, type WebWorkerLike } from "../engine/index.js";
import { Cancelled, cacheStats, checkRequest, putArray, putInput, putPhantom, putPreset, runPreview, userMessage, type RunRequest } from "./engine.js";

declare const self: { postMessage(m: unknown, transfer?: Transferable[]): void; onmessage: ((ev: MessageEvent) => void) | null };

let latest: Int32Array | null = null;
let latestPosted = 0;
const current = (): number => (latest ? Atomics.load(latest, 0) : latestPosted);
let executor: Executor | null = null;
let executorName = "";

export type ToWorker =
  | { t: "init"; presets: Record<string, string>; phantoms: Record<string, string>; gen?: SharedArrayBuffer; engineWorkers: number }
  | { t: "input"; name: string; text: string }
  | { t: "array"; name: string; bytes: Uint8Array; bundled: boolean }
  | { t: "run"; gen: number; req: RunRequest; at: number }
  | { t: "latest"; gen: number };

/** Wall-clock milliseconds comparable between the page and its workers (performance.timeOrigin differs per thread). */
const wall = (): number => performance.timeOrigin + performance.now();

async function runOne(gen: number, req: RunRequest, received: number): Promise<void> {
  try {
    const started = wall();
    const { out, rest } = await runPreview(req, () => current() !== gen, (done, total) => {
      if (req.quality === "full") self.postMessage({ t: "progress", gen, done, total });
    }, executor!);
    const stamps = { received, started, posted: wall() };
    self.postMessage({ t: "result", gen, out, stamps, executor: executorName, cache: cacheStats }, [out.image.buffer as ArrayBuffer]);
    // the k-space view and the .npy bytes after the image (the page paints the image first; its exports wait for these)
    const more = rest();
    self.postMessage({ t: "rest", gen, quality: req.quality, rest: more }, [more.kmag.buffer as ArrayBuffer, more.kspaceNpy.buffer as ArrayBuffer, more.imageNpy.buffer as ArrayBuffer]);
    // the closed-form check after the image is on its way (the page paints first)
    if (req.quality === "preview" && current() === gen) self.postMessage({ t: "check", gen, check: checkRequest(req) });
  } catch (e) {
    if (e instanceof Cancelled) {
      self.postMessage({ t: "cancelled", gen, quality: req.quality });
      return;
    }
    const u = userMessage(e);
    self.postMessage({ t: "error", gen, quality: req.quality, message: u ? u.message : `internal error: ${(e as Error).message}`, key: u?.key ?? null, internal: !u });
  }
}

const queue: { job: Extract<ToWorker, { t: "run" }>; received: number }[] = [];
let busy = false;
function pump(): void {
  if (busy) return;
  busy = true;
  // a later message posts a timer, so the newest request is always seen before older queued ones run
  setTimeout(async () => {
    const next = queue.pop();
    queue.length = 0;
    if (next && next.job.gen === current()) await runOne(next.job.gen, next.job.req, next.received);
    busy = false;
    if (queue.length) pump();
  }, 0);
}

self.onmessage = (ev: MessageEvent) => {
  const m = ev.data as ToWorker;
  if (m.t === "init") {
    for (const [k, v] of Object.entries(m.presets)) putPreset(k, v);
    for (const [k, v] of Object.entries(m.phantoms)) putPhantom(k, v);
    if (m.gen) latest = new Int32Array(m.gen);
    const n = Math.max(1, m.engineWorkers);
    // a DOM Worker is a WebWorkerLike (its onmessage is typed for the full MessageEvent, of which the executor reads only data)
    executor = webWorkerExecutor(Array.from({ length: n }, () => new Worker("engine-worker.js", { type: "module" })) as unknown as WebWorkerLike[]);
    executorName = `Web Worker executor, ${n} engine worker${n > 1 ? "s" : ""}${latest ? ", shared memory" : ", copies"}`;
    self.postMessage({ t: "ready" });
  } else if (m.t === "input") {
    putInput(m.name, m.text);
  } else if (m.t === "array") {
    putArray(m.name, m.bytes, m.bundled);
  } else if (m.t === "latest") {
    latestPosted = m.gen;
  } else if (m.t === "run") {
    latestPosted = Math.max(latestPosted, m.gen);
    queue.push({ job: m, received: wall() });
    pump();
  }
};
