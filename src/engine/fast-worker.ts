/**
 * Helper thread of the fast readout operator (worker_threads). Messages: a
 * run's shared buffers (engine/fast-phase.ts PhaseShared: the thread
 * transforms the blocks the main thread hands over until the run ends, then
 * waits for the next run); a memory reserve to write ahead (touchReserve);
 * part of a run's RF maps to fill (rf-job.ts runRfJob).
 * Loaded as compiled JavaScript.
 */
import { parentPort } from "node:worker_threads";
import { phaseHelperLoop, touchReserve, type PhaseShared } from "./fast-phase.js";
import { runRfJob, type RfJob } from "./rf-job.js";

parentPort!.on("message", (m: PhaseShared | { touch: SharedArrayBuffer; ctrl: SharedArrayBuffer } | { rf: RfJob }) => {
  if ("touch" in m) touchReserve(m.touch, m.ctrl);
  else if ("rf" in m && "maps" in m.rf) runRfJob(m.rf);
  else phaseHelperLoop(m as PhaseShared);
});
