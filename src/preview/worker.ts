/**
 * The previewer's Web Worker: holds the presets and phantoms in its file
 * table, runs each request at preview quality, then refines to default
 * quality. The page writes the newest edit's number into a shared Int32 (or
 * posts it when memory cannot be shared); work for an older edit stops at the
 * next engine chunk.
 */
import { Cancelled, checkRequest, putInput, putPhantom, putPreset, runPreview, userMessage, type RunRequest } from "./engine.js";

declare const self: { postMessage(m: unknown, transfer?: Transferable[]): void; onmessage: ((ev: MessageEvent) => void) | null };

let latest: Int32Array | null = null;
let latestPosted = 0;
const current = (): number => (latest ? Atomics.load(latest, 0) : latestPosted);

export type ToWorker =
  | { t: "init"; presets: Record<string, string>; phantoms: Record<string, string>; gen?: SharedArrayBuffer }
  | { t: "input"; name: string; text: string }
  | { t: "run"; gen: number; req: RunRequest; refine: boolean }
  | { t: "latest"; gen: number };

async function runOne(gen: number, req: RunRequest): Promise<boolean> {
  try {
    if (req.quality === "full") {
      // the refining worker first answers the closed-form check of the edit
      self.postMessage({ t: "check", gen, check: checkRequest(req) });
      if (current() !== gen) return false;
    }
    const out = await runPreview(req, () => current() !== gen, (done, total) => {
      if (req.quality === "full") self.postMessage({ t: "progress", gen, done, total });
    });
    self.postMessage({ t: "result", gen, out }, [out.image.buffer as ArrayBuffer, out.kmag.buffer as ArrayBuffer, out.kspaceNpy.buffer as ArrayBuffer, out.imageNpy.buffer as ArrayBuffer]);
    return true;
  } catch (e) {
    if (e instanceof Cancelled) return false;
    const u = userMessage(e);
    self.postMessage({ t: "error", gen, quality: req.quality, message: u ? u.message : `internal error: ${(e as Error).message}`, key: u?.key ?? null, internal: !u });
    return false;
  }
}

const queue: Extract<ToWorker, { t: "run" }>[] = [];
let busy = false;
function pump(): void {
  if (busy) return;
  busy = true;
  // a later message posts a timer, so the newest request is always seen before older queued ones run
  setTimeout(async () => {
    const job = queue.pop();
    queue.length = 0;
    if (job && job.gen === current()) {
      const ok = await runOne(job.gen, job.req);
      if (ok && job.refine && job.gen === current()) await runOne(job.gen, { ...job.req, quality: "full" });
    }
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
    self.postMessage({ t: "ready" });
  } else if (m.t === "input") {
    putInput(m.name, m.text);
  } else if (m.t === "latest") {
    latestPosted = m.gen;
  } else if (m.t === "run") {
    latestPosted = Math.max(latestPosted, m.gen);
    queue.push(m);
    pump();
  }
};
