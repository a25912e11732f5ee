/**
 * The Web Worker executor (browser-safe: no node:* module, no DOM types
 * needed): the same contract as serialExecutor and the Node pool
 * (executor.ts). The workers are made once by the caller and kept across
 * engine runs (a page makes them from its bundled engine-worker script, whose
 * body is `serveEngineWorker` below). Per run (one session) the plan and the
 * isochromat arrays are posted once to each worker used — shared memory
 * (SharedArrayBuffer) where the page is cross-origin isolated, read in place;
 * structured-clone copies otherwise, posted after the RF maps are filled —
 * then chunk indices; each partial k-space comes back transferred, and the
 * driver (simulateWith) adds partials in the fixed order of sum.ts, so the
 * k-space is bitwise that of serialExecutor() for any number of workers.
 */
import type { IsochromatSet } from "../isochromats/index.js";
import { ENGINE_ARRAYS } from "../isochromats/fields.js";
import { ChunkScratch, runChunk } from "./chunk.js";
import { partialLength } from "./fold.js";
import { AbortedError, type Executor, type ExecutorSession } from "./executor.js";
import { fillRfMaps, isShared, type EnginePlan } from "./plan.js";

/** What the executor needs of a Web Worker (a browser `Worker` fits; tests may pass an in-process stand-in). */
export interface WebWorkerLike {
  postMessage(message: unknown, transfer: ArrayBuffer[]): void;
  onmessage: ((ev: { data: unknown }) => void) | null;
  onerror?: ((ev: unknown) => void) | null;
}

/** Executor → engine worker. `s` numbers the session, so a reply of an abandoned session is told apart. */
export type WebEngineRequest =
  | { t: "open"; s: number; plan: EnginePlan; iso: Partial<IsochromatSet> }
  | { t: "maps"; s: number; c0: number; c1: number }
  | { t: "chunk"; s: number; c: number }
  | { t: "close"; s: number };
/** Engine worker → executor. */
export type WebEngineReply =
  | { t: "maps"; s: number }
  | { t: "chunk"; s: number; c: number; re: ArrayBuffer; im: ArrayBuffer }
  | { t: "error"; s: number; message: string };

/** The isochromat fields a chunk reads. */
function chunkIso(iso: IsochromatSet): Partial<IsochromatSet> {
  const out: Record<string, unknown> = { count: iso.count, uGrid: iso.uGrid, vGrid: iso.vGrid, wGrid: iso.wGrid };
  for (const k of ENGINE_ARRAYS) out[k] = iso[k];
  return out as Partial<IsochromatSet>;
}

/** Whether the plan's RF maps live in shared memory (workers can fill them in place). */
function mapsShared(plan: EnginePlan): boolean {
  return isShared(plan.rfMaps.buffer);
}

/**
 * An executor over `workers` (kept open across runs; the caller terminates
 * them). `open(plan, iso, jobs)` uses at most `jobs` of them.
 */
export function webWorkerExecutor(workers: WebWorkerLike[]): Executor & { readonly workers: number } {
  if (workers.length === 0) throw new Error("webWorkerExecutor: at least one worker");
  let nextSession = 1;
  // a worker is busy from a request until its reply, whichever session sent it
  const busy = new Array<boolean>(workers.length).fill(false);
  let active: Session | null = null;
  let failure: Error | null = null;
  workers.forEach((w, i) => {
    w.onmessage = (ev) => {
      const r = ev.data as WebEngineReply;
      busy[i] = false;
      if (active && r.s === active.id) active.reply(i, r);
      active?.pump();
    };
    w.onerror = (ev) => {
      failure = new Error(`engine worker failed: ${(ev as { message?: string })?.message ?? String(ev)}`);
      active?.fail(failure);
    };
  });

  class Session implements ExecutorSession {
    readonly id = nextSession++;
    readonly size: number;
    private opened = false;
    private jobs: { req: (s: number) => WebEngineRequest; ready: () => boolean }[] = [];
    private outstanding = 0;
    private settle: { ok: () => void; fail: (e: Error) => void; onReply: (r: WebEngineReply) => void } | null = null;

    constructor(private readonly plan: EnginePlan, private readonly iso: IsochromatSet, n: number) {
      this.size = n;
    }

    /** Posts the plan and isochromats to the workers of this session (once; after the maps are filled when memory is not shared). */
    private open(): void {
      if (this.opened) return;
      this.opened = true;
      const iso = chunkIso(this.iso);
      for (let i = 0; i < this.size; i++) workers[i]!.postMessage({ t: "open", s: this.id, plan: this.plan, iso } satisfies WebEngineRequest, []);
    }

    fail(e: Error): void {
      const s = this.settle;
      this.settle = null;
      this.jobs = [];
      s?.fail(e);
    }

    reply(_i: number, r: WebEngineReply): void {
      if (!this.settle) return;
      this.outstanding--;
      if (r.t === "error") return this.fail(new Error(`engine worker: ${r.message}`));
      try {
        this.settle.onReply(r);
      } catch (e) {
        this.fail(e as Error);
      }
    }

    pump(): void {
      if (!this.settle) return;
      for (let i = 0; i < this.size && this.jobs.length > 0; i++) {
        if (busy[i] || !this.jobs[0]!.ready()) continue;
        const job = this.jobs.shift()!;
        busy[i] = true;
        this.outstanding++;
        workers[i]!.postMessage(job.req(this.id), []);
      }
      if (this.jobs.length === 0 && this.outstanding === 0) {
        const s = this.settle;
        this.settle = null;
        s.ok();
      }
    }

    private schedule(jobs: Session["jobs"], onReply: (r: WebEngineReply) => void, signal?: AbortSignal): Promise<void> {
      return new Promise<void>((ok, fail) => {
        if (failure) return fail(failure);
        if (signal?.aborted) return fail(new AbortedError());
        const onAbort = () => this.fail(new AbortedError());
        signal?.addEventListener("abort", onAbort);
        const done = () => signal?.removeEventListener("abort", onAbort);
        this.jobs = jobs;
        this.outstanding = 0;
        this.settle = { ok: () => { done(); ok(); }, fail: (e) => { done(); fail(e); }, onReply };
        active = this;
        this.open();
        this.pump();
      });
    }

    async fillRfMaps(classes: number, signal?: AbortSignal): Promise<void> {
      // copies could not carry the filled maps back: fill them here, before the plan is posted
      if (!mapsShared(this.plan)) {
        if (signal?.aborted) throw new AbortedError();
        fillRfMaps(this.plan, 0, classes);
        return;
      }
      const per = Math.max(256, Math.ceil(classes / (8 * this.size)));
      const jobs: Session["jobs"] = [];
      for (let c = 0; c < classes; c += per) {
        const c0 = c, c1 = Math.min(classes, c + per);
        jobs.push({ req: (s) => ({ t: "maps", s, c0, c1 }), ready: () => true });
      }
      await this.schedule(jobs, () => {}, signal);
    }

    async runChunks(c0: number, c1: number, onChunk: (c: number, re: Float64Array, im: Float64Array) => void, waitingFor: () => number, signal?: AbortSignal): Promise<void> {
      const window = 2 * this.size + 4;
      const jobs: Session["jobs"] = [];
      for (let c = c0; c < c1; c++) jobs.push({ req: (s) => ({ t: "chunk", s, c }), ready: () => c < waitingFor() + window });
      await this.schedule(jobs, (r) => {
        if (r.t !== "chunk") throw new Error("web executor: unexpected reply");
        onChunk(r.c, new Float64Array(r.re), new Float64Array(r.im));
      }, signal);
    }

    async close(): Promise<void> {
      this.fail(new AbortedError());
      if (active === this) active = null;
      if (this.opened) for (let i = 0; i < this.size; i++) workers[i]!.postMessage({ t: "close", s: this.id } satisfies WebEngineRequest, []);
    }
  }

  return {
    workers: workers.length,
    open: (plan, iso, jobs) => new Session(plan, iso, Math.max(1, Math.min(workers.length, jobs))),
  };
}

/**
 * The body of an engine worker: answers the executor's requests. `post` is
 * the worker scope's postMessage. Returns the message handler (a page's
 * worker script sets it as `self.onmessage`).
 */
export function serveEngineWorker(post: (m: WebEngineReply, transfer?: ArrayBuffer[]) => void): (ev: { data: unknown }) => void {
  const sessions = new Map<number, { plan: EnginePlan; iso: IsochromatSet; scratch: ChunkScratch | null }>();
  return (ev) => {
    const m = ev.data as WebEngineRequest;
    try {
      if (m.t === "open") {
        sessions.clear(); // one run at a time: an older session is over
        sessions.set(m.s, { plan: m.plan, iso: m.iso as IsochromatSet, scratch: null });
      } else if (m.t === "close") {
        sessions.delete(m.s);
      } else {
        const ses = sessions.get(m.s);
        if (!ses) throw new Error(`no open session ${m.s}`);
        if (m.t === "maps") {
          fillRfMaps(ses.plan, m.c0, m.c1);
          post({ t: "maps", s: m.s });
        } else {
          ses.scratch ??= new ChunkScratch(ses.plan);
          const size = partialLength(ses.plan);
          const re = new Float64Array(size), im = new Float64Array(size);
          runChunk(ses.plan, ses.iso, m.c, re, im, ses.scratch);
          post({ t: "chunk", s: m.s, c: m.c, re: re.buffer, im: im.buffer }, [re.buffer, im.buffer]);
        }
      }
    } catch (e) {
      if (m.t === "maps" || m.t === "chunk") post({ t: "error", s: m.s, message: (e as Error).message });
    }
  };
}
