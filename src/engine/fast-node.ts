/**
 * Node's helper thread for the fast readout operator (engine/fast.ts
 * setPhaseHelper): one worker_threads thread, started on first use and kept
 * (unref'd: it never keeps the process alive) for later runs. It shares the
 * phase step of a run's blocks through shared memory (engine/fast-phase.ts);
 * every element of k-space is computed by the same arithmetic on whichever
 * thread, so the bits do not depend on it. With one core there is no helper.
 */
import { availableParallelism } from "node:os";
import { Worker } from "node:worker_threads";
import { setPhaseHelper, type PhaseHelper } from "./fast.js";
import { engineWorkerScript } from "./worker-script.js";

let worker: Worker | null = null;
let failed = false;

/** The helper thread, or null where there is none (one core, or it failed to start; a run with one worker, Executor.threads = 1, does not ask). */
export function nodePhaseHelper(): PhaseHelper | null {
  if (failed || availableParallelism() < 2) return null;
  if (!worker) {
    try {
      const w = new Worker(engineWorkerScript("fast-worker"));
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
  return { start: (shared) => w.postMessage(shared), touch: (buf, ctrl) => w.postMessage({ touch: buf, ctrl }), rf: (job) => w.postMessage({ rf: job }) };
}

setPhaseHelper(nodePhaseHelper);
