/**
 * Helper thread of the fast readout operator (worker_threads). Messages: a
 * run's shared buffers (engine/fast-phase.ts PhaseShared: the thread
 * transforms the blocks the main thread hands over until the run ends, then
 * waits for the next run); a memory reserve to write ahead (touchReserve);
 * part of a run's RF maps to fill (rf-job.ts runRfJob); the through-slice
 * convergence check of a run (convergence.ts runConvergenceJob).
 * Loaded as compiled JavaScript.
 */
import { parentPort } from "node:worker_threads";
import { phaseHelperLoop, touchReserve, type PhaseShared } from "./fast-phase.js";
import { runRfJob, type RfJob } from "./rf-job.js";
import type { ConvergenceJob } from "./convergence.js";

parentPort!.on("message", (m: PhaseShared | { touch: SharedArrayBuffer; ctrl: SharedArrayBuffer } | { rf: RfJob } | { convergence: ConvergenceJob }) => {
  if ("touch" in m) touchReserve(m.touch, m.ctrl);
  else if ("rf" in m && "maps" in m.rf) runRfJob(m.rf);
  else if ("convergence" in m) convergenceJob(m.convergence);
  else phaseHelperLoop(m as PhaseShared);
});

let convergence: typeof import("./convergence.js") | null = null;

/**
 * Runs a convergence job: the whole engine is loaded for the first one only,
 * later ones run at once (before the run's phase step, posted after them,
 * blocks this thread). A job not begun when the poster needs it is taken back.
 */
function convergenceJob(job: ConvergenceJob): void {
  if (convergence) convergence.runConvergenceJob(job);
  else {
    void import("./convergence.js").then((c) => {
      convergence = c;
      c.runConvergenceJob(job);
    });
  }
}
