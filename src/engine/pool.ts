/**
 * The Node executor: a worker_threads pool over the plan's fixed chunks. The plan and the
 * isochromat arrays live in SharedArrayBuffers and are read in place by every
 * worker; each chunk's partial k-space comes back to the main thread, which
 * adds partials in the fixed order of sum.ts. So 1, 2 or N workers give
 * bitwise the same k-space, and so does a sharded run merged later.
 */
import { Worker } from "node:worker_threads";
import { engineWorkerScript } from "./worker-script.js";
import type { IsochromatSet } from "../isochromats/index.js";
import { ENGINE_ARRAYS } from "../isochromats/fields.js";
import type { Sequence } from "../sequence/types.js";
import { AbortedError, simulateWith, type Executor, type ExecutorSession, type KSpace, type RunOptions } from "./executor.js";
import type { EnginePlan } from "./plan.js";
import type { ReadoutReport } from "./fast.js";
import type { WorkerReply, WorkerRequest } from "./worker.js";

export { AbortedError, PARALLEL_RF_CLASSES } from "./executor.js";

/** The engine worker's script (engine/worker-script.ts): worker.js beside this file, or bundled from the sources. */
export function workerPath(): string | URL {
  return engineWorkerScript("worker");
}

/** The isochromat fields a worker reads (all shared). */
function workerIso(iso: IsochromatSet): Partial<IsochromatSet> {
  const out: Record<string, unknown> = { count: iso.count, uGrid: iso.uGrid, vGrid: iso.vGrid, wGrid: iso.wGrid };
  for (const k of ENGINE_ARRAYS) {
    if (!(iso[k].buffer instanceof SharedArrayBuffer)) throw new Error("engine pool: isochromat arrays must be shared (shareEngineArrays)");
    out[k] = iso[k];
  }
  return out as Partial<IsochromatSet>;
}

export class EnginePool implements ExecutorSession {
  private readonly workers: Worker[] = [];
  private failure: Error | null = null;
  private onFail: ((e: Error) => void) | null = null;
  private terminated = false;
  /** A run was stopped (abort or failure) and workers may be mid-chunk. */
  private interrupted = false;

  constructor(plan: EnginePlan, iso: IsochromatSet, count: number) {
    const path = workerPath();
    const data = { plan, iso: workerIso(iso) };
    for (let k = 0; k < count; k++) {
      const w = new Worker(path, { workerData: data });
      w.on("error", (e) => this.fail(e));
      w.on("exit", (code) => {
        if (!this.terminated && code !== 0) this.fail(new Error(`engine worker exited with code ${code}`));
      });
      this.workers.push(w);
    }
  }

  get size(): number {
    return this.workers.length;
  }

  private fail(e: Error): void {
    if (this.failure) return;
    this.failure = e;
    this.onFail?.(e);
  }

  /**
   * Ends the session. After a run that finished, each worker is asked to stop
   * (it closes its port and its thread ends on its own, once anything V8 still
   * compiles for it is done); `terminate()` only as a fallback after 10 s. A
   * stopped or failed run terminates at once. Terminating an isolate while a
   * background compile job for it is still running can abort the whole Node
   * process (seen once under load: "Assertion failed: (data.first) != nullptr"
   * in NodePlatform::ForIsolate), so the orderly way is the default.
   */
  async close(): Promise<void> {
    if (this.terminated) return;
    if (this.interrupted || this.failure) return this.terminate();
    this.terminated = true;
    await Promise.all(this.workers.map((w) => new Promise<void>((resolve) => {
      const timer = setTimeout(() => void w.terminate().then(() => resolve()), 10_000);
      w.once("exit", () => {
        clearTimeout(timer);
        resolve();
      });
      w.postMessage({ t: "close" } satisfies WorkerRequest);
    })));
  }

  /** Stops every worker at once (mid-chunk too). */
  async terminate(): Promise<void> {
    if (this.terminated) return;
    this.terminated = true;
    await Promise.all(this.workers.map((w) => w.terminate()));
  }

  /**
   * Sends `jobs` to the workers, at most one outstanding per worker, and
   * calls onReply for each reply. `ready(job)` may hold a job back (to bound
   * memory while the in-order sum waits); held jobs are retried after each reply.
   */
  private schedule<J>(jobs: J[], req: (j: J) => WorkerRequest, onReply: (r: WorkerReply) => void, ready: (j: J) => boolean, signal?: AbortSignal): Promise<void> {
    return new Promise<void>((resolve, reject) => {
      let next = 0, outstanding = 0, finished = false;
      const idle: Worker[] = [...this.workers];
      const handlers = new Map<Worker, (r: WorkerReply) => void>();
      const cleanup = () => {
        finished = true;
        for (const [w, h] of handlers) w.off("message", h);
        signal?.removeEventListener("abort", onAbort);
        this.onFail = null;
      };
      const stop = (e: Error) => {
        if (finished) return;
        this.interrupted = true;
        cleanup();
        reject(e);
      };
      const onAbort = () => stop(new AbortedError());
      this.onFail = stop;
      if (this.failure) return stop(this.failure);
      if (signal?.aborted) return onAbort();
      signal?.addEventListener("abort", onAbort);
      const pump = () => {
        while (idle.length > 0 && next < jobs.length && ready(jobs[next]!)) {
          const w = idle.pop()!;
          outstanding++;
          w.postMessage(req(jobs[next++]!));
        }
        if (next === jobs.length && outstanding === 0) {
          cleanup();
          resolve();
        }
      };
      for (const w of this.workers) {
        const h = (r: WorkerReply) => {
          if (finished) return;
          outstanding--;
          idle.push(w);
          try {
            onReply(r);
          } catch (e) {
            return stop(e as Error);
          }
          pump();
        };
        handlers.set(w, h);
        w.on("message", h);
      }
      pump();
    });
  }

  /** Fills the plan's RF maps, split into class ranges among the workers. */
  fillRfMaps(classes: number, signal?: AbortSignal): Promise<void> {
    const per = Math.max(256, Math.ceil(classes / (8 * this.workers.length)));
    const jobs: [number, number][] = [];
    for (let c = 0; c < classes; c += per) jobs.push([c, Math.min(classes, c + per)]);
    return this.schedule(jobs, ([c0, c1]) => ({ t: "maps", c0, c1 }), () => {}, () => true, signal);
  }

  /**
   * Runs chunks c0 … c1−1; each partial is handed to onChunk(c, re, im) as
   * it arrives (any order). At most `window` chunks past `waitingFor()` are
   * handed out, so held partials stay bounded.
   */
  runChunks(c0: number, c1: number, onChunk: (c: number, re: Float64Array, im: Float64Array) => void, waitingFor: () => number, signal?: AbortSignal): Promise<void> {
    const jobs: number[] = [];
    for (let c = c0; c < c1; c++) jobs.push(c);
    const window = 2 * this.workers.length + 4;
    return this.schedule(
      jobs,
      (c) => ({ t: "chunk", c }),
      (r) => {
        if (r.t !== "chunk") throw new Error("engine pool: unexpected reply");
        onChunk(r.c, new Float64Array(r.re), new Float64Array(r.im));
      },
      (c) => c < waitingFor() + window,
      signal,
    );
  }
}

/** The Node executor: up to `workers` worker threads per engine run (never more than there are jobs). */
export function nodeExecutor(workers: number): Executor {
  return { threads: workers, open: (plan, iso, jobs) => new EnginePool(plan, iso, Math.max(1, Math.min(workers, jobs))) };
}

export interface ParallelOptions extends RunOptions {
  /** Worker threads (≥ 1). */
  workers: number;
}

/**
 * The same result as simulateSerial, bitwise, on a pool of worker threads:
 * the isochromats are moved to shared memory, RF maps of many classes are
 * filled in parallel, chunks are scheduled dynamically and their partials
 * summed in the fixed order on this thread.
 */
export function simulateParallel(seq: Sequence, iso: IsochromatSet, opts: ParallelOptions): Promise<{ kspace: KSpace; plan: EnginePlan; readout: ReadoutReport }> {
  return simulateWith(nodeExecutor(opts.workers), seq, iso, opts);
}
